"""Stabilisers computed on the data: at each placement, the smallest conductance (largest
resistor) that brings the count to 0 and the least-damped natural frequency up to a damping ratio.

**Count, exactly on the samples.** A conductance G between port nodes i and j (j = ground:
e = e_i, else e = e_i − e_j) adds the rank-one term G·e·eᵀ to the port Y with the devices on and
off. By the matrix determinant lemma det(Y + G e eᵀ) = det Y · (1 + G eᵀY⁻¹e), so

    NDF_G = NDF · (1 + G φ_on) / (1 + G φ_off),   φ = eᵀ Z e,

with no model (Z_off from Z_on by the Woodbury identity when only the devices are given:
Z_off = Z_on + Z_on U (I − Γ Vᵀ Z_on U)⁻¹ Γ Vᵀ Z_on; Golub & Van Loan, *Matrix Computations*,
4th ed., sec. 2.1.4). Its clockwise encirclements, band edges judged as for NDF
(``check.counted``), are the count with the part added.

**Damping, from the validated model.** The natural frequencies with the part are the zeros of
1 + G φ_on(s) (the secular equation of a rank-one modification: G. H. Golub, "Some modified
matrix eigenvalue problems", SIAM Review 15(2), 1973 — cited from memory). With φ_on fitted as
Σ r_p/(s − p) + c + d·s, the model's zeros as poles (``identify.fit_nodes``), they are the
eigenvalues of a small real matrix (``secular``), so ζ with the part follows without refitting;
placements whose φ fit is looser than ``identify.NODE_FIT_LIMIT`` get the count only.

**Search.** G on a log grid (``GRID``, 3 per decade); the first grid point whose roots in the
band are all in the left half-plane with least ζ ≥ the target is bracketed with the point before
it, and that step is narrowed by splitting it into ``FINE_POINTS`` log steps (twice); its
sample count must be 0 (else the grid is scanned again with the count at every point that the
roots pass). Without the model's roots the scan uses the count alone. Where no grid point meets
the target, the smallest conductance that comes within ``NEAR_BEST`` of the highest least ζ the
placement reaches without a growing root is kept.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from workers.engine.check import Analysis, counted
from workers.engine.conversions import batched_inv
from workers.engine.identify import NODE_FIT_LIMIT, REAL_ZERO, NodeFit, fit_nodes
from workers.engine.margin import band_limits_rad_s
from workers.engine.secular import SecularRoots

PER_DECADE = 3
GRID = 1e-5 * 10.0 ** (np.arange(0, 6 * PER_DECADE + 1) / PER_DECADE)  # 10 µS … 10 S
FINE_POINTS = 6   # the last grid step (2.15×) split into this many log steps, ...
FINE_ROUNDS = 2   # ... twice: to 2.1 %
NEAR_BEST = 0.02  # a part that cannot meet the target: the smallest within 2 % of its best ζ


@dataclass(frozen=True)
class Placement:
    """A resistor from port node ``first`` to ``second`` (None: ground)."""

    first: int
    second: int | None

    def vector(self, n: int) -> np.ndarray:
        e = np.zeros(n)
        e[self.first] = 1.0
        if self.second is not None:
            e[self.second] = -1.0
        return e


@dataclass(frozen=True)
class Trial:
    """The circuit with conductance G at a placement: sample count, least ζ in the band."""

    conductance_s: float
    count: int | None            # None: not evaluated
    damping_ratio: float | None  # least ζ of the roots in the band (None: no model / no root)
    least_damped_hz: float | None
    growing: bool                # a root in the band in the right half-plane

    def damped_enough(self, target: float) -> bool:
        return not self.growing and (self.damping_ratio is None or
                                     self.damping_ratio >= target)


@dataclass(frozen=True)
class Found:
    placement: Placement
    trial: Trial
    meets_target: bool
    modelled: bool  # ζ comes from the model's roots


class StabiliserSearch:
    """The data of one check prepared for trials at many placements (module docstring)."""

    def __init__(self, analysis: Analysis, node_fit: NodeFit | None, target: float,
                 placements: list[Placement]) -> None:
        self.analysis, self.target, self.placements = analysis, target, placements
        request = analysis.request
        valid = analysis.valid
        self.frequency_hz = request.frequency_hz[valid]
        self.ndf = analysis.loops.ndf[valid]
        self.first = np.array([p.first for p in placements])
        self.second = np.array([-1 if p.second is None else p.second for p in placements])
        z_all = analysis.z_on
        phi_all = self._quadratic(z_all)
        self.phi_on = phi_all[valid]
        self.phi_off = self._phi_off(z_all[valid])
        self.limits = band_limits_rad_s(analysis)
        self.fit = None if node_fit is None else self._placement_fit(node_fit, phi_all)
        self.secular = None if self.fit is None else SecularRoots(
            self.fit.poles_rad_s, self.fit.residues, self.fit.constant, self.fit.slope,
            self.fit.scale_rad_s)

    def _placement_fit(self, node_fit: NodeFit, phi: np.ndarray) -> NodeFit:
        """Partial-fraction fits of every placement's φ_on: a shunt's is its node's Z_kk fit,
        the pairs' are fitted with the same poles."""
        pair = self.second >= 0
        residues = node_fit.residues[:, self.first].copy()
        constant = node_fit.constant[self.first].copy()
        slope = node_fit.slope[self.first].copy()
        error = node_fit.error[self.first].copy()
        if pair.any():
            fitted = fit_nodes(self.analysis.request.frequency_hz, phi[:, pair],
                               node_fit.poles_rad_s, node_fit.scale_rad_s, like=node_fit)
            residues[:, pair], constant[pair] = fitted.residues, fitted.constant
            slope[pair], error[pair] = fitted.slope, fitted.error
        return NodeFit(node_fit.poles_rad_s, residues, constant, slope, node_fit.scale_rad_s,
                       error)

    def _rows(self, x: np.ndarray) -> np.ndarray:
        """eᵀ x for every placement: x (F, N, K) → (F, M, K)."""
        pair = self.second >= 0
        rows = x[:, self.first, :].copy()
        rows[:, pair, :] -= x[:, self.second[pair], :]
        return rows

    def _quadratic(self, z: np.ndarray) -> np.ndarray:
        """eᵀ z e for every placement: z (F, N, N) → (F, M)."""
        pair = self.second >= 0
        a, b = self.first, self.second
        phi = z[:, a, a].copy()
        phi[:, pair] += (z[:, b[pair], b[pair]] - z[:, a[pair], b[pair]]
                         - z[:, b[pair], a[pair]])
        return phi

    def _phi_off(self, z_on: np.ndarray) -> np.ndarray:
        """eᵀ Z_off e per sample and placement (module docstring)."""
        state = self.analysis.state
        if self.analysis.request.gain_off is not None:
            return self._quadratic(batched_inv(state.y_off[self.analysis.valid]).values)
        phi = self._quadratic(z_on)
        if state.u.shape[1] == 0:
            return phi
        gains = state.gains[self.analysis.valid]
        z_u = z_on @ state.u                                          # (F, N, D)
        vt_z = np.swapaxes(state.v.T @ z_on, 1, 2)                      # (F, N, D): Zᵀ V
        a = np.eye(gains.shape[1]) - gains[:, :, None] * (state.v.T @ z_u)
        left = self._rows(z_u)                                         # eᵀ Z U  (F, M, D)
        right = gains[:, :, None] * np.swapaxes(self._rows(vt_z), 1, 2)  # Γ Vᵀ Z e (F, D, M)
        with np.errstate(all="ignore"):
            try:
                solved = np.linalg.solve(a, right)
            except np.linalg.LinAlgError:
                return np.full_like(phi, np.nan)
        return phi + np.einsum("fmd,fdm->fm", left, solved)

    def fitted(self, m: int) -> bool:
        return self.fit is not None and bool(self.fit.error[m] <= NODE_FIT_LIMIT)

    def count(self, m: int, g: float) -> int | None:
        """The clockwise encirclement count of NDF_G on the samples."""
        with np.errstate(all="ignore"):
            h = self.ndf * (1.0 + g * self.phi_on[:, m]) / (1.0 + g * self.phi_off[:, m])
        ok = np.isfinite(h) & (np.abs(h) > 0)
        if ok.sum() < 3:
            return None
        return counted(self.frequency_hz[ok], h[ok], self.analysis.request)[0].clockwise

    def trials(self, m: int, conductances: np.ndarray, with_count: bool = True) -> list[Trial]:
        """The circuit with each of ``conductances`` at placement ``m``: least ζ of the roots in
        the band (Im ≥ 0, |s| inside it) and whether one grows; the count if asked."""
        trials = self._uncounted([(m, np.asarray(conductances, dtype=float))])[0]
        return [self._counted(m, t) for t in trials] if with_count else trials

    def _uncounted(self, asked: list[tuple[int, np.ndarray]]) -> list[list[Trial]]:
        """Trials without their counts for every (placement, conductances) pair of ``asked``:
        the fitted placements' roots in one stacked computation, the others' bare."""
        fitted = [k for k, (m, _) in enumerate(asked) if self.fitted(m)]
        found = [[Trial(float(x), None, None, None, False) for x in g] for _, g in asked]
        for k, trials in zip(fitted, self._modelled_trials([asked[k] for k in fitted]),
                             strict=True):
            found[k] = trials
        return found

    def _modelled_trials(self, asked: list[tuple[int, np.ndarray]]) -> list[list[Trial]]:
        """Trials (no count) at fitted placements, every (placement, conductances) pair of
        ``asked`` in one stacked root computation."""
        if not asked:
            return []
        columns = np.concatenate([np.full(len(g), m) for m, g in asked])
        g = np.concatenate([np.asarray(x, dtype=float) for _, x in asked])
        assert self.secular is not None
        roots = self.secular.roots(columns, g, self.limits[1])
        size = np.abs(roots)
        with np.errstate(invalid="ignore"):
            chosen = (roots.imag >= -REAL_ZERO * size) & (size >= self.limits[0]) \
                & (size <= self.limits[1])
            ratios = np.where(chosen, -roots.real / size, np.inf)
        k = np.argmin(ratios, axis=1)
        rows = np.arange(g.size)
        found = np.isfinite(ratios[rows, k])
        zeta = np.where(found, ratios[rows, k], np.nan).tolist()
        where = np.where(found, np.abs(roots[rows, k].imag) / (2 * np.pi), np.nan).tolist()
        growing = (chosen & (roots.real > 0)).any(axis=1).tolist()
        trials = [Trial(x, None, None if z != z else z, None if w != w else w, grow)
                  for x, z, w, grow in zip(g.tolist(), zeta, where, growing, strict=True)]
        out, start = [], 0
        for _, x in asked:
            out.append(trials[start:start + len(x)])
            start += len(x)
        return out

    def trial(self, m: int, g: float, with_count: bool = True) -> Trial:
        return self.trials(m, np.array([g]), with_count)[0]

    def _counted(self, m: int, trial: Trial) -> Trial:
        return trial if trial.count is not None else \
            replace(trial, count=self.count(m, trial.conductance_s))

    def _first(self, m: int, trials: list[Trial], with_count: bool) -> int | None:
        """Index of the first trial that meets the target (counting where the roots pass when
        ``with_count``; ``trials`` is updated with the counts made)."""
        for k, t in enumerate(trials):
            if not t.damped_enough(self.target):
                continue
            if not with_count:
                return k
            trials[k] = t = self._counted(m, t)
            if t.count == 0:
                return k
        return None

    def search_all(self, ms: list[int]) -> list[Found]:
        """``search(m, confirm=False)`` for each of ``ms``, the grids and narrowing rounds of
        all of them in one stacked root computation each."""
        modelled = [m for m in ms if self.fitted(m)]
        others = [m for m in ms if not self.fitted(m)]
        found = dict(zip(modelled, self._searched(modelled, False), strict=True))
        found.update(zip(others, self._searched(others, True), strict=True))
        return [found[m] for m in ms]

    def search(self, m: int, confirm: bool = True) -> Found:
        """The smallest conductance at placement ``m`` that meets the target, or the best one
        on the grid (module docstring). With the model's roots the grid and its last step are
        scanned on them, and the count at the end is made by ``confirmed`` (at once unless
        ``confirm`` is false, for a caller that confirms only the placements it keeps);
        without the roots the scan is on the count."""
        found = self._searched([m], not self.fitted(m))[0]
        return self.confirmed(found) if confirm else found

    def confirmed(self, found: Found) -> Found:
        """``found`` with its count made; a part that met the target on the roots but leaves a
        count is searched again with the count at every grid point the roots pass."""
        if found.trial.count is not None:
            return found
        trial = self._counted(self.placements.index(found.placement), found.trial)
        if trial.count == 0 or not found.meets_target:
            return replace(found, trial=trial)
        return self._searched([self.placements.index(found.placement)], True)[0]

    def _searched(self, ms: list[int], with_count: bool) -> list[Found]:
        """The search of each of ``ms`` (module docstring): the first grid point that meets the
        target (with a sample count of 0 too when ``with_count``), its step narrowed
        ``FINE_ROUNDS`` times into ``FINE_POINTS`` log steps, keeping the step before the first
        point that meets it, to within (2.15)^(1/FINE_POINTS^FINE_ROUNDS); the grids, and each
        round, of all placements in one stacked root computation."""
        found: dict[int, Found] = {}
        brackets: dict[int, tuple[float, float, Trial]] = {}  # low, high, best (at high)
        for m, trials in zip(ms, self._uncounted([(m, GRID) for m in ms]), strict=True):
            first = self._first(m, trials, with_count)
            if first is None:
                found[m] = Found(self.placements[m], self._best(m, trials), False,
                                 self.fitted(m))
            elif first == 0:
                found[m] = Found(self.placements[m], trials[0], True, self.fitted(m))
            else:
                brackets[m] = (float(GRID[first - 1]), float(GRID[first]), trials[first])
        for _ in range(FINE_ROUNDS):
            points = {m: np.geomspace(low, high, FINE_POINTS + 1)
                      for m, (low, high, _) in brackets.items()}
            fine = self._uncounted([(m, x[1:-1]) for m, x in points.items()])
            for (m, x), trials in zip(points.items(), fine, strict=True):
                _, high, best = brackets[m]
                k = self._first(m, trials, with_count)
                if k is not None:
                    best, high = trials[k], float(x[k + 1])
                brackets[m] = (float(x[k if k is not None else FINE_POINTS - 1]), high, best)
        for m, (_, _, best) in brackets.items():
            found[m] = Found(self.placements[m], best, True, self.fitted(m))
        return [found[m] for m in ms]

    def _best(self, m: int, trials: list[Trial]) -> Trial:
        """Without a grid point that meets the target. With the model's roots: among the points
        with no growing root (else all), the smallest conductance whose least ζ is within
        ``NEAR_BEST`` of the highest (a larger part only shorts the node); without them, the
        lowest count, then the smallest conductance."""
        if self.fitted(m):
            pool = [t for t in trials if not t.growing] or trials
            ratios = [t.damping_ratio for t in pool if t.damping_ratio is not None]
            if ratios:
                top = max(ratios)
                pool = [t for t in pool if t.damping_ratio is not None
                        and t.damping_ratio >= top - NEAR_BEST * abs(top)]
            return pool[0]
        counted_trials = [self._counted(m, t) for t in trials]
        return min(counted_trials, key=lambda t: (np.inf if t.count is None else t.count,
                                                  t.conductance_s))
