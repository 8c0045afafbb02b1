"""The lean AAA core (workers/engine/aaa.py) against scipy.interpolate.AAA as an independent oracle.

Reference implementation: ``scipy.interpolate.AAA`` (SciPy >= 1.15) with ``clean_up=False``, the
algorithm of Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA algorithm for rational
approximation", SIAM J. Sci. Comput. 40(3), A1494–A1522, 2018. Both run the same greedy steps on
the same data, so they must choose the same support points in the same order and give the same
rational function, error history, poles and zeros (up to rounding). The data: a real-rational
response with an unstable pole pair on the mirrored jω axis (as the engine fits it), the same
with seeded noise (the fit stops at max_terms), tan(πz/2) on a spiral (an example of SciPy's AAA
documentation), and tiny sets where the Loewner matrix has fewer rows than columns. The exact
cases end ill-conditioned, where both take the column-scaled Loewner matrix.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.interpolate import AAA

from workers.engine.aaa import aaa

W0 = 2 * np.pi * 1e9


def _response(noise: float = 0.0, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """(s − z)(s − z̄)/((s − p)(s − p̄)) with p = (0.05 ± 1.6j)·ω₀ (unstable) and z = (−0.1 ±
    2.3j)·ω₀, on 101 scaled jω points and their mirror images (conjugated values)."""
    f = np.linspace(1e7, 5e9, 101)
    s = 2j * np.pi * f
    z, p = (-0.1 + 2.3j) * W0, (0.05 + 1.6j) * W0
    h = (s - z) * (s - np.conj(z)) / ((s - p) * (s - np.conj(p)))
    if noise:
        rng = np.random.default_rng(seed)
        h = h * (1 + noise * (rng.standard_normal(h.size) + 1j * rng.standard_normal(h.size)))
    x = s / (2 * np.pi * f[-1])
    return np.concatenate([x, -x]), np.concatenate([h, np.conj(h)])


def _spiral() -> tuple[np.ndarray, np.ndarray]:
    z = np.exp(np.linspace(-0.5, 0.5 + 15j * np.pi, 1000))
    return z, np.tan(np.pi * z / 2)


def _scipy(z: np.ndarray, f: np.ndarray, rtol: float, terms: int, stops: bool) -> AAA:
    if stops:  # SciPy warns when it stops at max_terms; the lean core leaves that to the caller
        with pytest.warns(RuntimeWarning, match="failed to converge"):
            return AAA(z, f, rtol=rtol, max_terms=terms, clean_up=False)
    return AAA(z, f, rtol=rtol, max_terms=terms, clean_up=False)


def _nearest_gap(found: np.ndarray, expected: np.ndarray) -> float:
    """Largest distance from an expected value to the nearest found one, relative to max(1, |e|)."""
    return max((float(np.min(np.abs(found - e))) / max(1.0, abs(e)) for e in expected),
               default=0.0)


CASES = {
    "rational, mirrored jw": (_response(), 1e-9, 30, False),
    "noisy, stops at max_terms": (_response(1e-4, seed=3), 1e-13, 30, True),
    "tan on a spiral": (_spiral(), 1e-13, 100, False),
}


@pytest.mark.parametrize("name", list(CASES))
def test_same_steps_and_same_rational_function_as_scipy(name):
    (z, f), rtol, terms, stops = CASES[name]
    reference = _scipy(z, f, rtol, terms, stops)
    lean = aaa(z, f, rtol, terms)
    # same support points, chosen in the same order, and the same weights up to rounding
    np.testing.assert_array_equal(lean.support_points, reference.support_points)
    np.testing.assert_array_equal(lean.support_values, reference.support_values)
    np.testing.assert_allclose(lean.weights, reference.weights, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(lean.errors, reference.errors, rtol=1e-9,
                               atol=1e-12 * np.max(np.abs(f)))
    assert (lean.errors[-1] > rtol * np.max(np.abs(f))) == stops
    # the same rational function off the data: a grid around the samples
    grid = (np.linspace(-1.5, 1.5, 61)[:, None] + 1j * np.linspace(-1.5, 1.5, 61)[None, :]
            ).ravel()
    expected = reference(grid)
    assert np.max(np.abs(lean(grid) - expected)) <= 1e-10 * np.max(np.abs(expected))


@pytest.mark.parametrize("name", ["rational, mirrored jw", "tan on a spiral"])
def test_same_poles_and_zeros_as_scipy(name):
    (z, f), rtol, terms, stops = CASES[name]
    reference = _scipy(z, f, rtol, terms, stops)
    lean = aaa(z, f, rtol, terms)
    assert lean.poles().size == reference.poles().size
    assert lean.roots().size == reference.roots().size
    assert _nearest_gap(lean.poles(), reference.poles()) <= 1e-9
    assert _nearest_gap(lean.roots(), reference.roots()) <= 1e-9


def test_recovers_the_closed_form_poles_and_zeros():
    # Analytic values: the factored form in _response (scaled by the top frequency 5 GHz).
    (z, f), rtol, terms, _ = CASES["rational, mirrored jw"]
    lean = aaa(z, f, rtol, terms)
    scale = 2 * np.pi * 5e9
    poles = np.array([0.05 + 1.6j, 0.05 - 1.6j]) * W0 / scale
    zeros = np.array([-0.1 + 2.3j, -0.1 - 2.3j]) * W0 / scale
    assert np.max([np.min(np.abs(lean.poles() - p)) / abs(p) for p in poles]) <= 1e-8
    assert np.max([np.min(np.abs(lean.roots() - r)) / abs(r) for r in zeros]) <= 1e-8


def test_interpolates_at_the_support_points():
    # AAA interpolates the data at its support points (the barycentric form, op. cit.), also
    # where the formula itself is 0/0.
    (z, f), rtol, terms, _ = CASES["rational, mirrored jw"]
    lean = aaa(z, f, rtol, terms)
    np.testing.assert_array_equal(lean(lean.support_points), lean.support_values)


def test_fewer_rows_than_columns_and_non_finite_samples_as_scipy():
    # Six points and rtol 0: from the fourth step the Loewner matrix has fewer rows than columns
    # (SciPy takes a null-space vector there); a NaN and an inf sample are dropped by both.
    z = np.exp(2j * np.pi * np.arange(8) / 8)
    f = 1.0 / (z - 2.0) + z**3
    f[2], f[5] = np.nan, np.inf
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # rtol 0 never converges
        reference = AAA(z, f, rtol=0.0, max_terms=6, clean_up=False)
    lean = aaa(z, f, 0.0, 6)
    np.testing.assert_array_equal(lean.support_points, reference.support_points)
    probe = np.array([0.3 + 0.1j, -0.7j, 1.5])
    np.testing.assert_allclose(lean(probe), reference(probe), rtol=1e-10)


def test_rejects_mismatched_input():
    with pytest.raises(ValueError, match="1-D of equal size"):
        aaa(np.zeros(3), np.zeros(4), 1e-9, 5)


def test_presorted_input_gives_scipys_fit():
    # The engine passes the mirrored points already in np.unique's order (ascending jω) and
    # skips the sort: the fit must still be SciPy's on the unsorted data.
    (z, f), rtol, terms, stops = CASES["noisy, stops at max_terms"]
    reference = _scipy(z, f, rtol, terms, stops)
    order = np.argsort(z.imag)
    lean = aaa(z[order], f[order], rtol, terms, presorted=True)
    np.testing.assert_array_equal(lean.support_points, reference.support_points)
    np.testing.assert_allclose(lean.weights, reference.weights, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(lean.errors, reference.errors, rtol=1e-9)


@pytest.mark.parametrize("looser", [1e-3, 1e-4, 5e-5, 4e-5, 1e-6])
def test_truncated_is_scipys_fit_with_the_looser_tolerance(looser):
    # The tolerance only decides where the greedy steps stop, so a fit cut back to a looser one
    # must be SciPy's fit run afresh with that tolerance (1e-6: never reached, the whole fit).
    (z, f), rtol, terms, _ = CASES["noisy, stops at max_terms"]
    cut = aaa(z, f, rtol, terms).truncated(looser)
    never = looser < 1e-5
    reference = _scipy(z, f, looser, terms, stops=never)
    assert (reference.errors.size == terms) == never
    np.testing.assert_array_equal(cut.support_points, reference.support_points)
    np.testing.assert_allclose(cut.weights, reference.weights, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(cut.errors, reference.errors, rtol=1e-9)
    assert cut.roots().size == reference.roots().size
    assert _nearest_gap(cut.roots(), reference.roots()) <= 1e-9
