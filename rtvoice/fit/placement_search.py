"""Finding the pluck and pickup distances that best explain one or more takes' partial levels.

The search (Mohamad, Dixon & Harte, JASA 142(6), 3530, 2017, read the two distances from the
comb with an autocorrelation; this is our own least-squares route to the same comb):

1. A grid over every pair of distances, 1 mm apart or finer, and over a coarse set of pickup
   resonances (:data:`RESONANCE_GRID`). With each distance's share of the comb floored on its own,
   the dB model is a sum of two columns, so after projecting out the free envelope the cost of all
   pairs is one Gram matrix (:func:`pair_costs`).
2. The best few local minima refined by ``scipy.optimize.least_squares`` (trust-region reflective,
   a soft-L1 loss so a mismeasured partial cannot pull the answer) over the distances, the
   resonance's frequency and Q (in logs) and, where asked, the aperture; the envelope's free part
   solved linearly inside every evaluation (:class:`rtvoice.fit.comb.CombModel`).
3. Uncertainties from the Jacobian at the solution: cov = s^2 (J^T J)^-1, the residual variance s^2
   over the degrees of freedom left, rows weighed as the loss weighs them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.ndimage
import scipy.optimize

from rtvoice.fit.comb import CombModel, Levels, comb_amplitude, factor_db, resonance_db

MIN_DISTANCE_MM = 5.0  # nothing is plucked or sensed nearer the saddle than this
GRID_STEP_MM = 1.0
#: (f_r in Hz, Q) tried on the grid; None: no resonance in reach.
RESONANCE_GRID: tuple[tuple[float, float] | None, ...] = (None,) + tuple(
    (float(f), q) for f in np.geomspace(800.0, 12000.0, 14) for q in (0.8, 1.5, 2.8, 5.0))
RESONANCE_BOUNDS_HZ = (200.0, 20000.0)
Q_BOUNDS = (0.3, 30.0)  # the engine's own range for electronics.q
CANDIDATES = 6
LOSS_SCALE = 2.5  # soft-L1 turns linear beyond this many residual standard deviations
DIFF_STEP = 1e-3  # relative step of the numerical Jacobian
RIDGE = 1e-12  # relative to J^T J's largest diagonal entry
MAX_NFEV = 60  # evaluations per refinement: a good start converges in 10-30, a hopeless one is cut short
PRELIM_BELOW_DB = 8.0  # the grid's first envelope follows the partials' tops, not the nulls
MEASURED_FLOOR_DB = -30.0


@dataclass(frozen=True)
class TakeModel:
    """One take as the search sees it: its levels, speaking length, known envelope and free basis."""

    levels: Levels
    length_mm: float
    known_db: np.ndarray
    basis: np.ndarray
    pluck_width_mm: float

    def model(self, fixed_extra_db: np.ndarray | float = 0.0) -> CombModel:
        return CombModel(self.levels, self.known_db + fixed_extra_db, self.basis)

    def comb(self, pluck_mm: float, pickup_mm: float, aperture_mm: float) -> np.ndarray:
        length = self.length_mm
        return comb_amplitude(self.levels.k, pluck_mm / length, pickup_mm / length,
                              self.pluck_width_mm / length, aperture_mm / length)


@dataclass(frozen=True)
class Layout:
    """Where each unknown sits in the parameter vector; None: held at the fixed value."""

    takes: int
    pickup_fixed_mm: float | None
    resonance: bool
    aperture_fixed_mm: float | None

    @property
    def size(self) -> int:
        return (self.pickup_fixed_mm is None) + self.takes + 2 * self.resonance + (self.aperture_fixed_mm is None)

    def split(self, theta: np.ndarray) -> tuple[float, np.ndarray, tuple[float, float] | None, float]:
        """(pickup mm, plucks mm, (f_r Hz, Q) or None, aperture mm) from ``theta``."""
        i = 0
        if self.pickup_fixed_mm is None:
            pickup, i = float(theta[0]), 1
        else:
            pickup = self.pickup_fixed_mm
        plucks = np.asarray(theta[i:i + self.takes], dtype=float)
        i += self.takes
        resonance = None
        if self.resonance:
            resonance = (float(np.exp(theta[i])), float(np.exp(theta[i + 1])))
            i += 2
        aperture = float(theta[i]) if self.aperture_fixed_mm is None else self.aperture_fixed_mm
        return pickup, plucks, resonance, aperture

    def join(self, pickup_mm: float, plucks_mm: Sequence[float] | np.ndarray, resonance: tuple[float, float] | None,
             aperture_mm: float) -> np.ndarray:
        theta = [pickup_mm] if self.pickup_fixed_mm is None else []
        theta += list(plucks_mm)
        if self.resonance and resonance is not None:
            theta += [float(np.log(resonance[0])), float(np.log(resonance[1]))]
        if self.aperture_fixed_mm is None:
            theta.append(aperture_mm)
        return np.array(theta, dtype=float)

    def bounds(self, takes: Sequence[TakeModel], max_aperture_mm: float) -> tuple[np.ndarray, np.ndarray]:
        low: list[float] = []
        high: list[float] = []
        if self.pickup_fixed_mm is None:
            low.append(MIN_DISTANCE_MM)
            high.append(max(t.length_mm for t in takes) / 2.0)
        for t in takes:
            low.append(MIN_DISTANCE_MM)
            high.append(t.length_mm / 2.0)  # |sin(k pi x)| is even about the middle: the saddle's half
        if self.resonance:
            low += [float(np.log(RESONANCE_BOUNDS_HZ[0])), float(np.log(Q_BOUNDS[0]))]
            high += [float(np.log(RESONANCE_BOUNDS_HZ[1])), float(np.log(Q_BOUNDS[1]))]
        if self.aperture_fixed_mm is None:
            low.append(0.0)
            high.append(max_aperture_mm)
        return np.array(low), np.array(high)


def residuals(theta: np.ndarray, layout: Layout, takes: Sequence[TakeModel], scales: np.ndarray) -> np.ndarray:
    """Every take's weighted residual in dB under ``theta``, each divided by its take's noise scale."""
    pickup, plucks, resonance, aperture = layout.split(theta)
    out = []
    for take, pluck, scale in zip(takes, plucks, scales, strict=True):
        extra = 0.0 if resonance is None else resonance_db(take.levels.freq_hz, *resonance)
        comb = take.comb(float(pluck), pickup, aperture)
        out.append(take.model(extra).weighted_residual(comb) / scale)
    return np.concatenate(out)


# -- the grid -----------------------------------------------------------------------------------------


def _preliminary_envelope(take: TakeModel, fixed_db: np.ndarray) -> np.ndarray:
    """The free envelope through the partials' tops (points far below it are left out, the nulls)."""
    y = take.levels.level_db - fixed_db
    w = take.levels.weight.copy()
    env: np.ndarray = np.zeros_like(y)
    for _ in range(4):
        sw = np.sqrt(w)
        coef, *_ = np.linalg.lstsq(take.basis * sw[:, None], y * sw, rcond=None)
        env = take.basis @ coef
        w = take.levels.weight * (y > env - PRELIM_BELOW_DB)
    return env


@dataclass(frozen=True)
class PairCosts:
    """Weighted squared residual of every (pluck, pickup) pair on the grid, minimised over the resonance
    grid, and the resonance (an index into ``RESONANCE_GRID``) that gave it."""

    cost: np.ndarray
    resonance: np.ndarray


def pair_costs(take: TakeModel, plucks_mm: np.ndarray, pickups_mm: np.ndarray,
               resonances: Sequence[tuple[float, float] | None] = RESONANCE_GRID) -> PairCosts:
    """Costs of every pair from ``plucks_mm`` x ``pickups_mm`` (shape (len(plucks), len(pickups)))."""
    k = take.levels.k
    projector = take.model().projector()
    z_pluck = projector @ factor_db(k, plucks_mm / take.length_mm)
    z_pickup = projector @ factor_db(k, pickups_mm / take.length_mm)
    shared = (np.sum(z_pluck**2, axis=0)[:, None] + np.sum(z_pickup**2, axis=0)[None, :]
              + 2.0 * z_pluck.T @ z_pickup)
    best = np.full(shared.shape, np.inf)
    which = np.zeros(shared.shape, dtype=int)
    f = take.levels.freq_hz
    for i, res in enumerate(resonances):
        fixed = take.known_db if res is None else take.known_db + resonance_db(f, *res)
        floor = fixed + _preliminary_envelope(take, fixed) + MEASURED_FLOOR_DB
        v = projector @ (np.maximum(take.levels.level_db, floor) - fixed)
        cost = float(v @ v) - 2.0 * (z_pluck.T @ v)[:, None] - 2.0 * (z_pickup.T @ v)[None, :] + shared
        better = cost < best
        best[better] = cost[better]
        which[better] = i
    return PairCosts(best, which)


def grid_mm(length_mm: float, k_max: float) -> np.ndarray:
    """Distances from the saddle to the middle of the string, fine enough for the highest partial's comb."""
    step = min(GRID_STEP_MM, length_mm / (8.0 * max(k_max, 1.0)))
    return np.arange(MIN_DISTANCE_MM, length_mm / 2.0 + 1e-9, step)


def local_minima(cost: np.ndarray, count: int, radius: int) -> np.ndarray:
    """Indices of the ``count`` lowest local minima of ``cost`` (any dimension), best first."""
    finite = np.where(np.isfinite(cost), cost, np.inf)
    lowest = scipy.ndimage.minimum_filter(finite, size=2 * radius + 1, mode="nearest")
    idx = np.argwhere((finite == lowest) & np.isfinite(finite))
    order = np.argsort(finite[tuple(idx.T)], kind="stable")
    picked: list[np.ndarray] = []
    for i in idx[order]:  # plateaus give several equal minima side by side: keep one
        if all(np.max(np.abs(i - j)) > radius for j in picked):
            picked.append(i)
        if len(picked) == count:
            break
    return np.array(picked, dtype=int).reshape(-1, cost.ndim)


# -- refinement and uncertainty -------------------------------------------------------------------


@dataclass(frozen=True)
class Solution:
    """A refined parameter vector, its robust cost and its covariance (inf where not determined)."""

    theta: np.ndarray
    cost: float
    covariance: np.ndarray
    residual_scale: float
    residual: np.ndarray
    jacobian: np.ndarray  # of the residuals, rows weighed as the loss weighs them


def refine(theta0: np.ndarray, layout: Layout, takes: Sequence[TakeModel], scales: np.ndarray,
           max_aperture_mm: float = 40.0, max_nfev: int | None = None) -> scipy.optimize.OptimizeResult:
    low, high = layout.bounds(takes, max_aperture_mm)
    x0 = np.clip(theta0, low + 1e-9, high - 1e-9)
    x_scale = np.array([1.0] * ((layout.pickup_fixed_mm is None) + layout.takes) + [0.1, 0.1] * layout.resonance
                       + [1.0] * (layout.aperture_fixed_mm is None))
    return scipy.optimize.least_squares(residuals, x0, bounds=(low, high), loss="soft_l1", f_scale=LOSS_SCALE,
                                        x_scale=x_scale, diff_step=DIFF_STEP, args=(layout, takes, scales),
                                        max_nfev=max_nfev or MAX_NFEV)


def solution_of(theta: np.ndarray, layout: Layout, takes: Sequence[TakeModel], scales: np.ndarray) -> Solution:
    """``theta``'s cost and covariance, from a central-difference Jacobian of the residuals."""
    theta = np.asarray(theta, dtype=float)
    r = residuals(theta, layout, takes, scales)
    jac = np.empty((r.size, theta.size))
    low, high = layout.bounds(takes, 1e9)
    for j in range(theta.size):
        h = DIFF_STEP * max(abs(theta[j]), 1.0)
        up, down = theta.copy(), theta.copy()
        up[j] = min(theta[j] + h, high[j])
        down[j] = max(theta[j] - h, low[j])
        jac[:, j] = (residuals(up, layout, takes, scales) - residuals(down, layout, takes, scales)) / (up[j] - down[j])
    # Rows weighed as soft-L1 weighs them at the solution (IRLS weights 1 / sqrt(1 + (r / c)^2)).
    irls = 1.0 / np.sqrt(np.sqrt(1.0 + (r / LOSS_SCALE) ** 2))
    jw, rw = jac * irls[:, None], r * irls
    free = r.size - theta.size - sum(t.basis.shape[1] for t in takes)
    s2 = float(rw @ rw) / max(free, 1)
    return Solution(theta, robust_cost(r), covariance_of(jw, s2), float(np.sqrt(s2)), r, jw)


def covariance_of(jacobian: np.ndarray, variance: float) -> np.ndarray:
    """variance (J^T J)^-1. A direction the data do not see (a singular J^T J: a resonance out of reach, two
    equal distances) gets a tiny ridge, so its variance comes out huge while the others keep theirs."""
    normal = jacobian.T @ jacobian
    if not np.all(np.isfinite(normal)):
        return np.full(normal.shape, np.inf)
    ridge = RIDGE * max(float(np.max(np.diag(normal))), 1e-300)
    out: np.ndarray = variance * np.linalg.inv(normal + ridge * np.eye(normal.shape[0]))
    return out


def robust_cost(r: np.ndarray) -> float:
    """The soft-L1 cost ``least_squares`` minimises: sum c^2 (sqrt(1 + (r / c)^2) - 1), about sum r^2 / 2."""
    return float(np.sum(LOSS_SCALE**2 * (np.sqrt(1.0 + (r / LOSS_SCALE) ** 2) - 1.0)))
