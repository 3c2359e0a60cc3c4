"""Cross-check of our Kerr QNMs against the independent `qnm` PyPI package.

`qnm` (Stein 2019, JOSS 4, 1683) solves the same Teukolsky problem with
Leaver's radial continued fraction but a spectral (Cook & Zalutskiy 2014)
angular solver and its own root finder.  It is used only here, as a
reference.  Nothing touches the network: its spin sequences are computed
from scratch, seeded with our Schwarzschild values, so its download cache is
never consulted.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from ringsearch.physics import qnm as ours

qnm_ref = pytest.importorskip("qnm", reason="the qnm reference package is not installed")


def _their_root(l, m, n, spin, guess, A_guess):
    from qnm.nearby import NearbyRootFinder

    finder = NearbyRootFinder(a=spin, s=-2, m=m, A_closest_to=A_guess, l_max=20,
                              omega_guess=guess, tol=1e-12, cf_tol=1e-14, n_inv=n,
                              Nr_min=300, Nr_max=300000)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w = finder.do_solve()
    assert w is not None, "the qnm package found no root"
    return complex(w), complex(finder.A)


CASES = [
    (2, 2, 0, 0.69), (2, 2, 1, 0.3), (2, 2, 3, 0.9), (2, 2, 7, 0.95), (2, -2, 5, 0.8),
    (2, 0, 7, 0.99), (2, 1, 4, 0.6), (2, -1, 6, 0.97), (3, 3, 0, 0.99), (3, -3, 2, 0.7),
    (3, 1, 3, 0.5), (4, 4, 0, 0.999), (4, -2, 3, 0.95), (4, 0, 1, 0.2),
]


@pytest.mark.parametrize(("l", "m", "n", "spin"), CASES)
def test_agrees_with_qnm_package_to_1e8(l, m, n, spin):
    w = ours.kerr_omega(l, m, n, spin)
    A = ours.separation_constant(l, m, n, spin)
    w_ref, A_ref = _their_root(l, m, n, spin, w, A)
    assert abs(w - w_ref) <= 1e-8 * abs(w_ref)
    # `qnm` uses the same separation-constant convention (l(l+1) - s(s+1) at a = 0)
    assert abs(A - A_ref) <= 1e-7 * abs(A_ref)


@pytest.mark.parametrize(("l", "m", "n"), [(2, 2, 5), (2, -2, 6), (2, 0, 7), (3, -3, 3)])
def test_overtone_labels_agree_with_qnm_spin_sequences(l, m, n):
    """Both codes follow the branch continuously from a = 0; compare at a = 0.99.

    Different roots differ by O(0.1); the threshold 1e-4 only asks for the same
    branch (`qnm`'s sequence uses its default root tolerance).  For l = 2,
    n = 4..7 and every m we found the same labels as `qnm` all the way to 0.99.
    """
    import scipy.optimize as so

    if not hasattr(so.nonlin, "NoConvergence"):  # qnm 0.4.4 refers to an old scipy path
        so.nonlin.NoConvergence = so.NoConvergence
    from qnm.spinsequence import KerrSpinSeq

    seq = KerrSpinSeq(s=-2, l=l, m=m, n=n, a_max=0.99, Nr_max=40000,
                      omega_guess=ours.kerr_omega(l, m, n, 0.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        seq.do_find_sequence()
    a = np.asarray(seq.a)
    w_ref = np.asarray(seq.omega)
    w = ours.kerr_omega(l, m, n, a)
    assert np.max(np.abs(w - w_ref) / np.abs(w_ref)) < 1e-4
