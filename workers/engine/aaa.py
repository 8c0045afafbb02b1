"""A lean AAA core: greedy barycentric rational approximation of sampled data.

The algorithm is AAA (Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA algorithm for rational
approximation", SIAM J. Sci. Comput. 40(3), A1494–A1522, 2018), step for step as
``scipy.interpolate.AAA`` (SciPy 1.17) runs it without its clean-up, which is the reference this
module is tested against (tests/test_aaa.py): at step m the next support point is the sample with
the largest residual |f − r|, the weights are the right singular vector of the smallest singular
value of the Loewner matrix A_ij = (f_i − f_j)/(z_i − z_j) over the other samples (columns
scaled to unit norm once A is ill-conditioned), and the iteration stops when max|f − r| <=
rtol·max|f| or at ``max_terms``. Poles and zeros are the finite eigenvalues of the arrowhead
pencil det(E − λB) = 0 with E = [[0, wᵀ], [1, diag z_j]] (zeros: w·f in place of w) and
B = diag(0, 1, …, 1), as SciPy's ``poles()`` and ``roots()`` form it.

Why it exists: the refinement runs a few small fits per check (about 200 samples, m <= 50), where
SciPy's general implementation spends much of each step around the arithmetic (workspace queries,
array-API dispatch, mask copies, error-state contexts) and has LAPACK form left singular vectors
that AAA never uses. This core takes the QR factor of the Loewner block and the SVD of its small
triangular factor (the path LAPACK's own tall SVD takes), with LAPACK's workspace sizes queried
once: on the 22 fits of the refinement benchmark it measured 2.4x faster than SciPy's (0.05 vs
0.12 s in all), with the same support points, weights and error histories to the last bit.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from scipy.linalg.lapack import zgeqrf, zgesdd, zgesdd_lwork, zggev

ILL_CONDITIONED = 1.0 / (3 * np.finfo(float).eps)  # SciPy's switch to column-scaled weights


@dataclass(frozen=True, eq=False)
class AAAFit:
    """A barycentric rational function r(z) = Σ w_j f_j/(z − z_j) / Σ w_j/(z − z_j)."""

    support_points: np.ndarray
    support_values: np.ndarray
    weights: np.ndarray
    errors: np.ndarray  # max|f − r| over the samples after each step
    data_max: float = np.inf  # max|f| over the samples (the tolerance is rtol × this)
    # every step's support points, values and weights (zeros included), for ``truncated``
    steps: tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...] = field(default=(), repr=False)
    _cache: dict[str, np.ndarray] = field(default_factory=dict, repr=False)

    def truncated(self, rtol: float) -> AAAFit:
        """The fit AAA returns on the same data with the looser tolerance ``rtol``: the greedy
        steps do not depend on the tolerance, which only decides where they stop, so that fit
        is this one's first step whose error is within rtol·max|f| (this fit when none is)."""
        within = np.nonzero(self.errors <= rtol * self.data_max)[0]
        if within.size == 0 or within[0] + 1 == self.errors.size:
            return self
        points, values, weights = self.steps[within[0]]
        keep = weights != 0
        return AAAFit(points[keep], values[keep], weights[keep],
                      self.errors[: within[0] + 1].copy(), self.data_max,
                      self.steps[: within[0] + 1])

    def _pencil(self, top_row: np.ndarray) -> np.ndarray:
        """Finite eigenvalues of the arrowhead pencil (LAPACK zggev, as scipy.linalg.eigvals
        calls it, with the workspace size it would query)."""
        n = self.weights.size + 1
        e = np.zeros((n, n), dtype=complex, order="F")
        e[0, 1:] = top_row
        e[1:, 0] = 1
        e[np.arange(1, n), np.arange(1, n)] = self.support_points
        b = np.eye(n, dtype=complex, order="F")
        b[0, 0] = 0
        alpha, beta, _, _, _, info = zggev(e, b, 0, 0, _ggev_workspace(n), 1, 1)
        if info != 0:
            raise np.linalg.LinAlgError(f"generalized eigenvalues failed (LAPACK info {info})")
        finite = beta != 0
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            values = alpha[finite] / beta[finite]
        return values[np.isfinite(values)]

    @property
    def weighted_values(self) -> np.ndarray:
        """w_j·f_j, the numerator's coefficients (kept after the first use)."""
        if "weighted_values" not in self._cache:
            self._cache["weighted_values"] = self.weights * self.support_values
        return self._cache["weighted_values"]

    def poles(self) -> np.ndarray:
        """Finite poles (eigenvalues of the arrowhead pencil with w in its top row)."""
        if "poles" not in self._cache:
            self._cache["poles"] = self._pencil(self.weights)
        return self._cache["poles"]

    def roots(self) -> np.ndarray:
        """Finite zeros (the same pencil with w·f in its top row)."""
        if "roots" not in self._cache:
            self._cache["roots"] = self._pencil(self.weighted_values)
        return self._cache["roots"]

    def __call__(self, z: np.ndarray) -> np.ndarray:
        """r at ``z``, vectorised; a point equal to a support point takes that point's value."""
        z = np.asarray(z, dtype=complex)
        with np.errstate(divide="ignore", invalid="ignore"):
            cauchy = 1.0 / (z.reshape(-1)[:, None] - self.support_points[None, :])
            r = (cauchy @ self.weighted_values) / (cauchy @ self.weights)
        # an infinite Cauchy entry makes its row of r NaN (weights are nonzero): look only then
        if not np.isfinite(r).all():
            rows, cols = np.nonzero(np.isinf(cauchy))
            r[rows] = self.support_values[cols]
        return r.reshape(z.shape)


_UPPER: dict[int, np.ndarray] = {}
_GGEV_WORK: dict[int, int] = {}
_GESDD_WORK: dict[int, int] = {}


def _gesdd_workspace(n: int) -> int:
    """zgesdd's optimal workspace for an n × n matrix (queried once per order; a smaller one
    takes another path through LAPACK and changes the last bits)."""
    if n not in _GESDD_WORK:
        _GESDD_WORK[n] = int(zgesdd_lwork(n, n, compute_uv=1, full_matrices=0)[0].real)
    return _GESDD_WORK[n]


def _ggev_workspace(n: int) -> int:
    """zggev's optimal workspace for order n (queried once per order)."""
    if n not in _GGEV_WORK:
        square = np.eye(n, dtype=complex, order="F")
        _GGEV_WORK[n] = int(zggev(square, square, 0, 0, -1)[4][0].real)
    return _GGEV_WORK[n]


def _upper(size: int) -> np.ndarray:
    """A 0/1 upper-triangular mask (size × size), kept between calls."""
    if size not in _UPPER:
        _UPPER[size] = np.triu(np.ones((size, size)))
    return _UPPER[size]


def _singular(block: np.ndarray, upper: np.ndarray) -> tuple[list[float], np.ndarray]:
    """Singular values and right singular vectors (rows of Vᴴ) of a tall ``block``: the SVD of
    its triangular QR factor R (A = QR has A's singular values and right vectors; LAPACK's own
    tall SVD takes the same QR step, then also forms the left vectors, which AAA never uses).
    ``upper``: a 0/1 upper-triangular mask at least as large as R."""
    n = block.shape[1]
    qr, _, _, info = zgeqrf(block, lwork=64 * n)  # >= the blocked optimum, as in LAPACK's SVD
    if info == 0:
        _, s, vh, info = zgesdd(qr[:n] * upper[:n, :n], lwork=_gesdd_workspace(n))
    if info != 0:
        raise np.linalg.LinAlgError(f"SVD of the Loewner matrix failed (LAPACK info {info})")
    return s.tolist(), vh  # Python floats: the step's scalar tests are cheaper on them


def aaa(z: np.ndarray, f: np.ndarray, rtol: float, max_terms: int, presorted: bool = False
        ) -> AAAFit:
    """AAA on samples ``f`` at distinct points ``z`` (module docstring).

    Non-finite samples are dropped and the points sorted, as SciPy does, so that ties in the
    greedy choice fall the same way; ``presorted``: the caller guarantees that ``z`` is already
    in that order (``np.unique``'s: by real, then imaginary part) without repeats, and the sort
    is skipped. Stopping at ``max_terms`` is not an error (SciPy warns): the caller compares
    ``errors[-1]`` with its tolerance.
    """
    z = np.asarray(z, dtype=complex)
    f = np.asarray(f, dtype=complex)
    if z.ndim != 1 or z.shape != f.shape or max_terms < 1:
        raise ValueError("aaa: z and f must be 1-D of equal size, max_terms >= 1")
    finite = np.isfinite(f)
    if presorted:
        z, f = (z, f) if finite.all() else (z[finite], f[finite])
    else:
        z, unique = np.unique(z[finite], return_index=True)
        f = f[finite][unique]
    size = z.size
    scale = float(np.max(np.abs(f)))
    atol = rtol * scale
    # column-major, as LAPACK wants the Loewner block and as SciPy's column selection leaves the
    # Cauchy block (so that r is summed in the same order and the error history is the same)
    cauchy = np.empty((size, max_terms), dtype=complex, order="F")
    loewner = np.empty((size, max_terms), dtype=complex, order="F")
    upper = _upper(max_terms)
    chosen = np.empty(max_terms, dtype=int)
    values = np.empty(max_terms, dtype=complex)
    errors = np.empty(max_terms)
    rest = np.ones(size, dtype=bool)
    residual = np.abs(f - f.sum() / size)  # the mean, as np.mean sums and divides
    steps = []
    ill = False
    with np.errstate(divide="ignore", invalid="ignore"):
        for m in range(max_terms):
            n = m + 1
            j = int(np.argmax(residual))
            chosen[m], values[m] = j, f[j]
            rest[j] = False
            np.divide(1.0, z - z[j], out=cauchy[:, m])
            np.multiply(f - f[j], cauchy[:, m], out=loewner[:, m])
            if size - n >= n:
                block = loewner[rest, :n]
                if not ill:
                    s, vh = _singular(block, upper)
                    # s[0]/s[-1] as numpy divides: x/0 = inf (ill-conditioned), 0/0 = nan (not)
                    ill = s[0] > 0 if s[-1] == 0 else s[0] / s[-1] > ILL_CONDITIONED
                if ill:
                    norms = np.sqrt(np.add.reduce((block.conj() * block).real, axis=0))
                    s, vh = _singular(block / norms, upper)
                # the singular values come sorted, largest first: the smallest may repeat
                k = 1
                while k < n and s[n - 1 - k] == s[n - 1]:
                    k += 1
                weights = vh[n - 1].conj() if k == 1 else \
                    vh[n - k:].conj().sum(axis=0) / np.sqrt(k)
                if ill:
                    weights = weights / norms
            else:
                space = scipy.linalg.null_space(loewner[rest, :n], check_finite=False)
                weights = space.sum(axis=-1) / np.sqrt(space.shape[-1])
            if weights.all():
                columns, w, fw = cauchy[:, :n], weights, weights * values[:n]
            else:
                used = weights != 0
                columns, w = cauchy[:, :n][:, used], weights[used]
                fw = w * values[:n][used]
            numerator = columns @ fw
            denominator = columns @ w
            r = np.where(np.isfinite(denominator), numerator / denominator, f)
            residual = np.abs(f - r)
            errors[m] = residual.max()
            steps.append(weights)
            if errors[m] <= atol:
                break
            residual[chosen[:n]] = -1.0
    keep = weights != 0
    points = z[chosen[:n]]
    return AAAFit(points[keep], values[:n][keep], weights[keep], errors[:n].copy(), scale,
                  tuple((points[:i + 1], values[:i + 1], w) for i, w in enumerate(steps)))
