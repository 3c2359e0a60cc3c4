"""The shipped QNM table and its interpolant: accuracy, physics checks, conversions."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ringsearch.errors import InputError
from ringsearch.physics import leaver, qnm


def test_table_content_and_ranges():
    modes = qnm.available_modes()
    expected = ({(2, m, n) for m in range(-2, 3) for n in range(8)}
                | {(l, m, n) for l in (3, 4) for m in range(-l, l + 1) for n in range(4)})
    assert set(modes) == expected
    lo, hi = qnm.spin_range()
    assert lo == 0.0 and hi >= 0.99  # every mode covers 0 <= chi <= 0.99
    assert qnm.spin_range(2, 2, 0) == (0.0, 0.999)
    assert qnm.TABLE_PATH.stat().st_size < 5e6


def test_interpolant_matches_direct_solves_at_random_spins():
    """Relative error of Re and Im below 1e-7 against a direct Leaver solve.

    A handful of seeded random (mode, spin) pairs keeps this fast; the table
    script checks every third interval of every mode when it builds the table.
    """
    rng = np.random.default_rng(20261201)
    modes = qnm.available_modes()
    worst = 0.0
    for k in rng.choice(len(modes), size=6, replace=False):
        mode = modes[k]
        chi = float(rng.uniform(0.0, qnm.spin_range(*mode)[1]))
        w = qnm.kerr_omega(*mode, chi)
        wd, Ad, _ = leaver.solve_at(*mode, chi, w, qnm.separation_constant(*mode, chi))
        err = max(abs(w.real - wd.real) / abs(wd.real), abs(w.imag - wd.imag) / abs(wd.imag))
        worst = max(worst, err)
        assert abs(qnm.separation_constant(*mode, chi) - Ad) <= 1e-7 * abs(Ad)
    print(f"largest relative interpolation error at random spins: {worst:.2e}")
    assert worst <= 1e-7


def test_recorded_validation_error_is_small():
    # the table script stores, per mode, its midpoint comparison with direct solves
    err = qnm._table().get("interp_error")
    if err is None:
        pytest.skip("table built without the validation pass")
    assert float(np.max(err)) <= 1e-7


def test_bcw_fits_for_fundamental_modes():
    """Berti, Cardoso & Will (2006), PRD 73, 064030, Table VIII fits.

    M*omega_R = f1 + f2 (1-chi)^f3 and Q = q1 + q2 (1-chi)^q3; the paper states the
    fits are good to a few per cent.  Coefficients:  # from memory
    """
    fits = {
        (2, 2, 0): ((1.5251, -1.1568, 0.1292), (0.7000, 1.4187, -0.4990)),
        (3, 3, 0): ((1.8956, -1.3043, 0.1818), (0.9000, 2.3430, -0.4810)),
    }
    chi = np.linspace(0.0, 0.99, 67)
    for mode, (f, q) in fits.items():
        w = qnm.kerr_omega(*mode, chi)
        fit_w = f[0] + f[1] * (1 - chi) ** f[2]
        fit_q = q[0] + q[1] * (1 - chi) ** q[2]
        assert np.max(np.abs(fit_w / w.real - 1)) < 0.03
        assert np.max(np.abs(fit_q / (-w.real / (2 * w.imag)) - 1)) < 0.03


def test_gw150914_remnant_ringdown():
    """68 Msun (detector frame), spin 0.69: f ~ 251 Hz, tau ~ 4 ms.

    Abbott et al. (2016), PRL 116, 221101 ("Tests of general relativity with
    GW150914"): least-damped mode near 251 Hz with damping time near 4 ms.
    """
    f, tau = qnm.mode_f_tau(68.0, 0.69)
    assert abs(f - 251.0) < 3.0
    assert abs(tau - 4.0e-3) < 0.3e-3


def test_schwarzschild_limit_of_table():
    # Leaver (1985) Table 1 / Berti, Cardoso & Starinets (2009):  # from memory
    w = qnm.kerr_omega(2, 1, 0, 0.0)
    assert abs(w - (0.373672 - 0.088962j)) < 1e-6


def test_vectorised_shapes_and_mirror():
    chi = np.linspace(0.0, 0.9, 12).reshape(3, 4)
    w = qnm.kerr_omega(2, 2, 1, chi)
    assert w.shape == (3, 4) and w.dtype == complex
    assert np.all(w.imag < 0) and np.all(w.real > 0)
    mirror = qnm.mirror_omega(2, 2, 1, chi)
    np.testing.assert_allclose(mirror, -np.conj(qnm.kerr_omega(2, -2, 1, chi)))
    assert np.all(mirror.real < 0)
    f, tau = qnm.mode_f_tau(np.array([10.0, 100.0]), 0.5)
    assert f.shape == (2,) and tau.shape == (2,)
    # frequency scales as 1/M, damping time as M (geometric units)
    assert math.isclose(f[0] / f[1], 10.0, rel_tol=1e-12)
    assert math.isclose(tau[1] / tau[0], 10.0, rel_tol=1e-12)


def test_prograde_frequency_grows_with_spin_and_retrograde_falls():
    # Kerr QNM behaviour (e.g. Berti, Cardoso & Starinets 2009, Fig. 4)
    chi = np.linspace(0.0, 0.99, 50)
    assert np.all(np.diff(qnm.kerr_omega(2, 2, 0, chi).real) > 0)
    assert np.all(np.diff(qnm.kerr_omega(2, -2, 0, chi).real) < 0)


@pytest.mark.parametrize("mode", [(2, 2, 7), (2, -2, 7), (2, 0, 7), (2, 0, 6), (4, 2, 3)])
def test_branches_are_continuous(mode):
    """Overtone labels follow continuity in spin: no jump between table nodes.

    On a grid 4x finer than the table, the second difference of omega stays of
    the size a smooth curve gives (a jump to another root would be O(0.1)).
    """
    top = qnm.spin_range(*mode)[1]
    y = np.linspace(1.0, math.sqrt(1 - top), 3000)
    w = qnm.kerr_omega(*mode, 1 - y * y)
    assert np.max(np.abs(np.diff(w, 2))) < 1e-3


@settings(max_examples=60, deadline=None, derandomize=True)  # reproducible in CI
@given(mass=st.floats(1.0, 1e4), spin=st.floats(0.0, 0.999))
def test_round_trip_mass_spin_f_tau(mass, spin):
    f, tau = qnm.mode_f_tau(mass, spin)
    m2, s2 = qnm.remnant_from_f_tau(f, tau)
    assert math.isclose(m2, mass, rel_tol=1e-8)
    assert abs(s2 - spin) < 1e-7


def test_round_trip_vectorised():
    rng = np.random.default_rng(7)
    mass = rng.uniform(5, 500, 1000)
    spin = rng.uniform(0, 0.99, 1000)
    m2, s2 = qnm.remnant_from_f_tau(*qnm.mode_f_tau(mass, spin))
    np.testing.assert_allclose(m2, mass, rtol=1e-8)
    np.testing.assert_allclose(s2, spin, atol=1e-7)


@pytest.mark.parametrize(
    ("call", "fragment"),
    [
        (lambda: qnm.kerr_omega(2, 2, 0, 1.0), "spin=1.0"),
        (lambda: qnm.kerr_omega(2, 2, 0, -0.1), "spin=-0.1"),
        (lambda: qnm.kerr_omega(2, -2, 7, 0.9985), "above the QNM table"),
        (lambda: qnm.kerr_omega(2, 2, 0, float("nan")), "spin=nan"),
        (lambda: qnm.kerr_omega(2, 2, 0, [0.1, np.inf]), "spin=inf"),
        (lambda: qnm.kerr_omega(2, 3, 0, 0.5), "m=3"),
        (lambda: qnm.kerr_omega(1, 0, 0, 0.5), "l=1"),
        (lambda: qnm.kerr_omega(5, 0, 0, 0.5), "l=5"),
        (lambda: qnm.kerr_omega(2, 2, 8, 0.5), "n=8"),
        (lambda: qnm.kerr_omega(3, 2, 4, 0.5), "n=4"),
        (lambda: qnm.kerr_omega(2, 2, -1, 0.5), "n=-1"),
        (lambda: qnm.kerr_omega(2.5, 2, 0, 0.5), "l=2.5"),
        (lambda: qnm.kerr_omega(2, 2, 0, "fast"), "spin='fast'"),
        (lambda: qnm.mode_f_tau(0.0, 0.5), "mass=0.0"),
        (lambda: qnm.mode_f_tau(-5.0, 0.5), "mass=-5.0"),
        (lambda: qnm.mode_f_tau(float("nan"), 0.5), "mass=nan"),
        (lambda: qnm.remnant_from_f_tau(250.0, 1e-6), "quality factor"),
        (lambda: qnm.remnant_from_f_tau(-250.0, 4e-3), "f_hz=-250.0"),
        (lambda: qnm.remnant_from_f_tau(250.0, float("nan")), "tau_s=nan"),
    ],
)
def test_bad_input_raises_one_sentence(call, fragment):
    with pytest.raises(InputError) as info:
        call()
    msg = str(info.value)
    assert fragment in msg
    assert msg.endswith(".") and msg.count(". ") == 0


def test_remnant_inversion_other_modes():
    # (3,3,0) has a quality factor monotonic in spin: the round trip works there too
    mass, spin = np.array([20.0, 150.0]), np.array([0.1, 0.95])
    m2, s2 = qnm.remnant_from_f_tau(*qnm.mode_f_tau(mass, spin, 3, 3, 0), 3, 3, 0)
    np.testing.assert_allclose(m2, mass, rtol=1e-8)
    np.testing.assert_allclose(s2, spin, atol=1e-7)
    # (2,0,7) spirals near the extremal limit, so f and tau cannot fix the remnant
    with pytest.raises(InputError, match="not monotonic"):
        qnm.remnant_from_f_tau(100.0, 1e-3, 2, 0, 7)
