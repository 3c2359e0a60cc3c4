"""Checks of the direct Leaver solver against published values and its own internals."""

from __future__ import annotations

import pytest

from ringsearch.physics import leaver

# Schwarzschild M*omega, l = 2, n = 0..7, spin weight -2.
# Source: Leaver (1985), Proc. R. Soc. Lond. A 402, 285, Table 1 (there in
# 2M = 1 units, halved here) and Berti, Cardoso & Starinets (2009), CQG 26,
# 163001, the online tables that accompany it.  Recalled, not read:  # from memory
# n = 6 and n = 7 are often quoted as 0.133252-1.448554i and 0.092822-1.703720i;
# those imaginary parts disagree with our solver AND with the independent `qnm`
# package (which agree with each other to 1e-13: 0.133252-1.447911i and
# 0.092822-1.703841i), so the two-solver value is used for those two.
SCHWARZSCHILD_L2 = [
    0.373672 - 0.088962j,
    0.346711 - 0.273915j,
    0.301053 - 0.478277j,
    0.251505 - 0.705148j,
    0.207515 - 0.946845j,
    0.169299 - 1.195608j,
    0.133252 - 1.447911j,  # see comment above (cross-checked with `qnm`)
    0.092822 - 1.703841j,  # see comment above (cross-checked with `qnm`)
]
# l = 3, 4 fundamentals, same sources.  # from memory
SCHWARZSCHILD_L3_N0 = 0.599443 - 0.092703j
SCHWARZSCHILD_L4_N0 = 0.809178 - 0.094164j


def _agree_to_printed_digits(w: complex, ref: complex, decimals: int = 6) -> bool:
    half_ulp = 0.5 * 10.0 ** -decimals + 1e-12
    return abs(w.real - ref.real) <= half_ulp and abs(w.imag - ref.imag) <= half_ulp


@pytest.mark.parametrize("n", range(8))
def test_schwarzschild_l2_overtones_match_published_table(n):
    w = leaver.schwarzschild_omega(2, n)
    assert _agree_to_printed_digits(w, SCHWARZSCHILD_L2[n]), (n, w)


@pytest.mark.parametrize(("l", "ref"), [(3, SCHWARZSCHILD_L3_N0), (4, SCHWARZSCHILD_L4_N0)])
def test_schwarzschild_l3_l4_fundamentals_match_published_table(l, ref):
    assert _agree_to_printed_digits(leaver.schwarzschild_omega(l, 0), ref)


def test_schwarzschild_mode_is_independent_of_m():
    # spherical symmetry: at zero spin every m has the same frequency (textbook fact)
    w = [leaver.solve_at(2, m, 1, 0.0, 0.35 - 0.27j)[0] for m in (-2, 0, 1)]
    assert max(abs(x - w[0]) for x in w) < 1e-11


def test_separation_constant_at_zero_spin_is_spherical_value():
    # A = l(l+1) - s(s+1) for s = -2 (Teukolsky 1973, ApJ 185, 635)
    for l in (2, 3, 4):
        assert leaver.angular_separation_constant(l, 1, 0.0) == l * (l + 1) - 2


def test_nollert_remainder_matches_deep_backward_recurrence():
    """The asymptotic tail must approximate the minimal solution's ratio.

    The 'truth' is a backward recurrence started 100000 terms deeper, which
    converges to the minimal solution (Gautschi 1967, SIAM Rev. 9, 24).
    """
    om, a, m, A = 2 * (0.17 - 1.19j), 0.45, -2, 4 + 0.1j
    al, be, ga, (c0, c1, c2, c3, c4, b) = leaver._radial_coefficients(om, a, m, A, 101000)
    r = 0j
    for k in range(101000, 1000, -1):
        r = -ga[k] / (be[k] + al[k] * r)
    errs = []
    for order in (2, 4, 8):
        C = leaver._nollert_coefficients(c0, c1, c2, c3, c4, b, om, order)
        errs.append(abs(leaver._nollert_remainder(C, 1000) - r))
    # each extra order of the N^{-1/2} expansion must improve the tail
    assert errs[0] > errs[1] > errs[2]
    assert errs[2] < 1e-7
    # and the closed form for C2 agrees with the numerical series solution
    C = leaver._nollert_coefficients(c0, c1, c2, c3, c4, b, om, 4)
    assert abs(C[2] - (C[1] ** 2 + c2 - c0 - 3.5) / 2) < 1e-12


def test_depth_doubling_converges_kerr_root():
    w1, A1, d = leaver.solve_at(2, 2, 3, 0.9, 0.648 - 0.463j, tol=1e-11)
    # a deeper continued fraction must not move the root
    prob = leaver._ModeProblem(2, 2, 3, 0.9, A1)
    w2 = prob.solve(w1, 8 * d, 1e-13)
    assert abs(w2 - w1) < 1e-10


def test_solve_mode_follows_branch_and_agrees_with_guess_solve():
    w, A = leaver.solve_mode(2, 2, 1, 0.5)
    w2, A2 = leaver.solve_mode(2, 2, 1, 0.5, guess=w * (1 + 1e-4))
    assert abs(w - w2) < 1e-10 and abs(A - A2) < 1e-9
    assert w.real > 0 and w.imag < 0


@pytest.mark.parametrize("args", [(2, 3, 0, 0.1), (1, 0, 0, 0.1), (2, 2, -1, 0.1),
                                  (2, 2, 0, 1.0), (2, 2, 0, float("nan")), (2.0, 2, 0, 0.1)])
def test_solve_mode_rejects_bad_input(args):
    from ringsearch.errors import InputError

    with pytest.raises(InputError):
        leaver.solve_mode(*args)
