"""One or more takes of one string fitted together: the starts from the grid, the refinement, the
aperture where the high partials show it, and what of the result is reported (with its sd) or left out.

The layout (:class:`rtvoice.fit.placement_search.Layout`) has one pickup distance for all takes
(given, or fitted), one pluck per take, one resonance and one aperture (the same pickup and coil).
Every sd is a standard deviation from the Jacobian, widened where the linear picture fails: another
reading almost as good (a rival minimum), a first null beyond the partials, a pluck over the pickup.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.optimize

from rtvoice.fit.comb import resonance_db
from rtvoice.fit.placement_search import (
    CANDIDATES,
    RESONANCE_GRID,
    Layout,
    Solution,
    TakeModel,
    covariance_of,
    grid_mm,
    local_minima,
    pair_costs,
    refine,
    residuals,
    robust_cost,
    solution_of,
)

APERTURE_GRID_MM = np.arange(4.0, 40.1, 3.0)
APERTURE_TRIES = 3  # readings refined again with the aperture free
MAX_APERTURE_MM = 40.0
APERTURE_REACH = 2.2  # k_max a / L: the partials reach past the sinc's first null at k = 2 L / a, into its sidelobe
APERTURE_CHI2 = 9.0  # ... and the aperture lowers the cost by this much (3 sds)
RESONANCE_REACH = 0.9  # the resonance is reported when the partials reach past it by this share ...
MIN_REPORTED_Q = 1.0  # ... it has a peak at all (below this the roll-off is the tilt's business) ...
MAX_RELATIVE_SD = 0.3  # ... and its frequency and Q (or the aperture) are known to this share
SEPARATION_MM = 3.0  # starts closer than this on the grid are one start
REACH_WEIGHT = 0.1  # partials weighing less than this share of the heaviest do not count as reached
UNSEEN_SHARE = 0.5  # a distance whose first null is not reached is known to about this share of itself
AMBIGUITY_CHI2 = 4.0  # another reading within this chi-square of the best widens the sds to reach it
OVER_PICKUP_CHI2 = 4.0  # a pluck is over the pickup when p = q fits within this chi-square of the best
PRUNE_CHI2 = 40.0  # grid starts worse than the best by more than this (in the take's noise units) are dropped
TIED_NFEV = 12  # a tied start (p = q) is only checked: at p = q the difference has no gradient to follow
MIN_SCALE = 0.02  # a take's residual scale never counts as below this (noise-free levels)
PROFILE_LIMIT_MM = 40.0
# What the Jacobian cannot see: the unknown tone filter bends the envelope the resonance is read from,
# and the model's own approximations move the distances a little. Added in quadrature to the sds
# (sizes from our synthetic trials, where the Jacobian's sds alone came out about half the errors).
RESONANCE_MODEL_SD_SHARE = 0.05
Q_MODEL_SD_SHARE = 0.15
POSITION_SD_FLOOR_MM = 0.2
APERTURE_MODEL_SD_MM = 3.0  # a contact width not given leaves a sinc of its own beside the aperture's

Places = tuple[float, np.ndarray]  # (pickup mm, each take's pluck mm)


@dataclass(frozen=True)
class Start:
    """A place for the refinement to start: pickup mm, each take's pluck mm, resonance or None, the
    grid's weighted squared residual there, and a limit on the refinement (None: the default)."""

    pickup_mm: float
    plucks_mm: tuple[float, ...]
    resonance: tuple[float, float] | None
    grid_cost: float
    max_nfev: int | None = None


@dataclass(frozen=True)
class Estimate:
    """What the takes tell, each value with its sd (None: not told); per-take arrays in take order."""

    pickup_mm: float
    pickup_sd_mm: float
    plucks_mm: np.ndarray
    plucks_sd_mm: np.ndarray
    over_pickup: np.ndarray  # per take: the pluck cannot be told from the pickup's distance
    aperture_mm: float | None
    aperture_sd_mm: float | None
    resonance_hz: float | None
    resonance_sd_hz: float | None
    q: float | None
    q_sd: float | None
    residual_db_rms: np.ndarray  # per take, weighted RMS of the dB residual
    notes: tuple[str, ...]


def _reach_k(take: TakeModel) -> float:
    """The highest partial that counts as reached (its weight not far below the heaviest's)."""
    return float(take.levels.k[take.levels.weight >= REACH_WEIGHT].max())


def _robust_scale(take: TakeModel, start: Start, pluck_mm: float) -> float:
    extra = 0.0 if start.resonance is None else resonance_db(take.levels.freq_hz, *start.resonance)
    r = take.model(extra).weighted_residual(take.comb(pluck_mm, start.pickup_mm, 0.0))
    return max(1.4826 * float(np.median(np.abs(r))), MIN_SCALE)


def _starts(takes: Sequence[TakeModel], pickup_mm: float | None) -> list[Start]:
    """The grid's best few places to start, best first."""
    radius = int(round(SEPARATION_MM))
    if pickup_mm is not None:  # each pluck on its own grid, the pickup where it was given
        found = []
        for take in takes:
            grid = grid_mm(take.length_mm, float(take.levels.k.max()))
            costs = pair_costs(take, grid, np.array([pickup_mm]))
            best = local_minima(costs.cost[:, 0], CANDIDATES if len(takes) == 1 else 1, radius)[:, 0]
            found.append([(float(grid[i]), RESONANCE_GRID[costs.resonance[i, 0]], float(costs.cost[i, 0]))
                          for i in best])
        if len(takes) == 1:
            return [Start(pickup_mm, (p,), r, c) for p, r, c in found[0]]
        return [Start(pickup_mm, tuple(f[0][0] for f in found), found[0][0][1], 0.0)]
    if len(takes) == 1:  # every pair, each once (the comb is symmetric)
        take = takes[0]
        grid = grid_mm(take.length_mm, float(take.levels.k.max()))
        costs = pair_costs(take, grid, grid)
        upper = np.where(np.triu(np.ones(costs.cost.shape, dtype=bool)), costs.cost, np.inf)
        pairs = [Start(float(grid[j]), (float(grid[i]),), RESONANCE_GRID[costs.resonance[i, j]], float(upper[i, j]))
                 for i, j in local_minima(upper, CANDIDATES, radius)]
        # The grid floors each distance's nulls on its own, so a double null (p = q) scores worse there
        # than it is: the best start's two distances are also tried tied, each over itself.
        top = pairs[0]
        tied = [Start(x, (x,), top.resonance, top.grid_cost, TIED_NFEV) for x in (top.pickup_mm, top.plucks_mm[0])]
        return pairs + tied
    # Several takes: the pickup is the distance every take can explain with a pluck of its own.
    pickups = grid_mm(max(t.length_mm for t in takes), max(float(t.levels.k.max()) for t in takes))
    profile = np.zeros(pickups.size)
    per_take = []
    for take in takes:
        plucks = grid_mm(take.length_mm, float(take.levels.k.max()))
        costs = pair_costs(take, plucks, pickups)
        noise = max(float(costs.cost.min()), 1e-12) / max(take.levels.count - take.basis.shape[1] - 4, 1)
        profile += costs.cost.min(axis=0) / noise
        per_take.append((plucks, costs))
    starts = []
    for (qi,) in local_minima(profile, CANDIDATES // 2, radius):
        chosen = [(plucks, costs, int(np.argmin(costs.cost[:, qi]))) for plucks, costs in per_take]
        resonance = RESONANCE_GRID[int(np.bincount([c.resonance[i, qi] for _, c, i in chosen]).argmax())]
        starts.append(Start(float(pickups[qi]), tuple(float(p[i]) for p, _, i in chosen), resonance,
                            float(profile[qi])))
    return starts


def estimate(takes: Sequence[TakeModel], *, pickup_mm: float | None, aperture_mm: float | None) -> Estimate:
    """Fit the takes (see the module's note)."""
    starts = _starts(takes, pickup_mm)
    scales = np.array([_robust_scale(t, starts[0], p) for t, p in zip(takes, starts[0].plucks_mm, strict=True)])
    if len(takes) == 1:  # starts far worse than the best on the grid are not worth refining
        starts = [s for s in starts if s.grid_cost <= starts[0].grid_cost + PRUNE_CHI2 * scales[0] ** 2]
    fixed_aperture = 0.0 if aperture_mm is None else float(aperture_mm)
    refined = []
    for start in starts:
        layout = Layout(len(takes), pickup_mm, start.resonance is not None, fixed_aperture)
        result = refine(layout.join(start.pickup_mm, start.plucks_mm, start.resonance, fixed_aperture), layout,
                        takes, scales, max_nfev=start.max_nfev)
        refined.append((float(result.cost), layout.split(result.x)[:2], result, layout))
    refined.sort(key=lambda r: r[0])
    cost, places, result, layout = refined[0]
    sol = solution_of(result.x, layout, takes, scales)
    notes: list[str] = []
    if aperture_mm is None:
        # The aperture's sinc has nulls where a pickup at half its width has them, so a wide aperture
        # can pass for a third distance: the best few readings are each refined with the aperture free.
        tries = [(r.x, lay) for c, _, r, lay in refined[:APERTURE_TRIES] if 2.0 * (c - cost) < PRUNE_CHI2]
        with_aperture, note = _with_aperture(sol, tries, takes, scales)
        notes.append(note)
        if with_aperture:
            refined = [(c, lay.split(x)[:2], x, lay) for c, x, lay in with_aperture]
            cost, places, _, _ = refined[0]
            sol = solution_of(refined[0][2], refined[0][3], takes, scales)
            layout = refined[0][3]
    # Another reading almost as good (2 x the cost difference is a chi-square in the takes' noise units).
    swappable = len(takes) == 1 and pickup_mm is None
    rivals = [_aligned(places, other, swappable) for c, other, _, _ in refined if 2.0 * (c - cost) < AMBIGUITY_CHI2]
    rivals = [r for r in rivals if _gap_mm(places, r) > SEPARATION_MM]
    return _report(sol, layout, takes, scales, notes, rivals, aperture_fitted=layout.aperture_fixed_mm is None)


def _aligned(best: Places, other: Places, swappable: bool) -> Places:
    """``other`` with its two distances swapped when that lies nearer ``best`` (one take: interchangeable)."""
    if swappable:
        swapped: Places = (float(other[1][0]), np.array([other[0]]))
        if _gap_mm(best, swapped) < _gap_mm(best, other):
            return swapped
    return other


def _gap_mm(a: Places, b: Places) -> float:
    return max(abs(a[0] - b[0]), float(np.max(np.abs(a[1] - b[1]))))


def _with_aperture(sol: Solution, tries: list[tuple[np.ndarray, Layout]], takes: Sequence[TakeModel],
                   scales: np.ndarray) -> tuple[list[tuple[float, np.ndarray, Layout]], str]:
    """The readings ``tries`` refined with the aperture free, best first, when the high partials tell it:
    its sinc's first null (nearly) reached, the cost clearly lower than ``sol``'s, its sd small; else
    an empty list. The contact's width, when not given, leaves the same sinc: what is fitted is then
    the two together."""
    if max(_reach_k(t) * MAX_APERTURE_MM / t.length_mm for t in takes) < APERTURE_REACH:
        return [], "aperture: the partials stop long before any aperture's first null"
    found = []
    for theta, layout in tries:
        pickup, plucks, resonance, _ = layout.split(theta)
        free = Layout(layout.takes, layout.pickup_fixed_mm, layout.resonance, None)
        # The sinc is flat in the aperture at 0, so the refinement starts from the best of a grid.
        costs = np.array([robust_cost(residuals(free.join(pickup, plucks, resonance, a), free, takes, scales))
                          for a in APERTURE_GRID_MM])
        if 2.0 * (sol.cost - costs.min()) < APERTURE_CHI2 / 2.0:  # no aperture on the grid helps: none will
            continue
        best = refine(free.join(pickup, plucks, resonance, float(APERTURE_GRID_MM[np.argmin(costs)])), free, takes,
                      scales, MAX_APERTURE_MM)
        found.append((float(best.cost), np.asarray(best.x), free))
    if not found:
        return [], "aperture: the high partials do not tell it (its sinc is not reached or not resolved)"
    found.sort(key=lambda f: f[0])
    cost, theta, free = found[0]
    aperture = float(theta[-1])
    reach = max(_reach_k(t) * aperture / t.length_mm for t in takes)
    if 2.0 * (sol.cost - cost) > APERTURE_CHI2 and reach >= APERTURE_REACH \
            and _sd(solution_of(theta, free, takes, scales).covariance, -1) < MAX_RELATIVE_SD * aperture:
        return found, ""
    return [], "aperture: the high partials do not tell it (its sinc is not reached or not resolved)"


def _sd(cov: np.ndarray, i: int) -> float:
    value = cov[i, i]
    return float(np.sqrt(value)) if np.isfinite(value) and value >= 0 else float("inf")


def _pair_profile(sol: Solution, layout: Layout, takes: Sequence[TakeModel],
                  scales: np.ndarray) -> tuple[bool, float, float]:
    """One take, both distances free: (can p = q explain it, the sd of the pickup, the sd of the pluck).

    At p = q the comb is sin^2 and the difference shows only to second order: the Jacobian's sd of it
    means nothing there. Worse, at p = q = 1/n the comb takes one value off its nulls, as sin(k pi / n)
    alone does, so one place and a second that hardly bends the envelope fit as well. So p = q is tried
    at the two distances and between them (the mean refitted each time); where it fits within
    OVER_PICKUP_CHI2, each distance's sd reaches the tied place, and between them the profile over the
    half-difference d says how wide d may be."""
    theta = sol.theta
    pickup, pluck = float(theta[0]), float(theta[1])

    def cost_at(centre: float, d: float) -> float:
        def at(s: float) -> float:
            th = theta.copy()
            th[0], th[1] = s + d, s - d
            return robust_cost(residuals(th, layout, takes, scales))
        found = scipy.optimize.minimize_scalar(at, bounds=(centre - 5.0, centre + 5.0), method="bounded",
                                               options={"xatol": 0.01})
        return float(found.fun)

    best = robust_cost(sol.residual)
    mean, d0 = (pickup + pluck) / 2.0, abs(pickup - pluck) / 2.0
    tied = [c for c in (mean, pickup, pluck) if 2.0 * (cost_at(c, 0.0) - best) < OVER_PICKUP_CHI2]
    if not tied:
        return False, 0.0, 0.0
    # The mean's sd from the Jacobian with the difference taken out (its column is the singular one).
    jac = sol.jacobian
    reduced = np.column_stack([jac[:, 0] + jac[:, 1], jac[:, 2:]])
    sd_mean = _sd(covariance_of(reduced, sol.residual_scale**2), 0)
    spread = 0.0
    if tied[0] == mean:  # how far |d| may move from |d0| for 2 x the cost to rise by 1 (one sd)
        step = 0.05
        while spread < PROFILE_LIMIT_MM and 2.0 * (cost_at(mean, d0 + spread + step) - best) < 1.0:
            spread, step = spread + step, step * 2.0
        spread += step
    reach_pickup = max(abs(c - pickup) for c in tied) + spread
    reach_pluck = max(abs(c - pluck) for c in tied) + spread
    return True, float(np.hypot(sd_mean, reach_pickup)), float(np.hypot(sd_mean, reach_pluck))


def _report(sol: Solution, layout: Layout, takes: Sequence[TakeModel], scales: np.ndarray, notes: list[str],
            rivals: list[Places], aperture_fitted: bool) -> Estimate:
    pickup, plucks, resonance, aperture = layout.split(sol.theta)
    cov = sol.covariance
    free_pickup = layout.pickup_fixed_mm is None
    first_pluck = 1 if free_pickup else 0
    pickup_sd = _sd(cov, 0) if free_pickup else 0.0
    plucks_sd = np.array([_sd(cov, first_pluck + t) for t in range(layout.takes)])
    over = np.zeros(layout.takes, dtype=bool)
    if free_pickup and layout.takes == 1:
        over[0], sd_pickup, sd_pluck = _pair_profile(sol, layout, takes, scales)
        if over[0]:  # the Jacobian's sds mean nothing where p = q: the profile's replace them
            pickup_sd, plucks_sd[0] = sd_pickup, sd_pluck
    else:  # the pickup is pinned by the user or by the other takes: each pluck's own sd says it
        over = np.abs(plucks - pickup) < 2.0 * plucks_sd
    if np.any(over):
        notes.append("the pluck lies over the pickup: the comb is nearly sin^2, the two distances are hard to part")
    for rival_pickup, rival_plucks in rivals:
        pickup_sd = max(pickup_sd, abs(rival_pickup - pickup)) if free_pickup else pickup_sd
        plucks_sd = np.maximum(plucks_sd, np.abs(rival_plucks - plucks))
    if rivals:
        shown = "; ".join(f"{p:.1f} and {', '.join(f'{x:.1f}' for x in q)} mm" for p, q in rivals)
        notes.append(f"another reading fits almost as well ({shown}): the sds reach it")
    for t, take in enumerate(takes):  # a null beyond the partials: the distance is read from a slope alone
        if take.length_mm / plucks[t] > _reach_k(take):
            plucks_sd[t] = max(plucks_sd[t], UNSEEN_SHARE * plucks[t])
            notes.append("a distance's first null lies beyond the partials: it is read from the comb's slope")
    if free_pickup and max(_reach_k(t) * pickup / t.length_mm for t in takes) < 1.0:
        pickup_sd = max(pickup_sd, UNSEEN_SHARE * pickup)
        notes.append("a distance's first null lies beyond the partials: it is read from the comb's slope")
    # An sd past the half string says "anywhere on it": it is held there.
    half = max(t.length_mm for t in takes) / 2.0
    pickup_sd = min(float(np.hypot(pickup_sd, POSITION_SD_FLOOR_MM)), half) if free_pickup else 0.0
    plucks_sd = np.minimum(np.hypot(plucks_sd, POSITION_SD_FLOOR_MM), [t.length_mm / 2.0 for t in takes])
    fr, fr_sd, q, q_sd = _resonance(resonance, cov, layout, takes, notes)
    contact_sd = APERTURE_MODEL_SD_MM if any(t.pluck_width_mm == 0 for t in takes) else 0.0
    rms = []
    for take, pluck in zip(takes, plucks, strict=True):
        extra = 0.0 if resonance is None else resonance_db(take.levels.freq_hz, *resonance)
        r = take.model(extra).fit_envelope(take.comb(float(pluck), pickup, aperture)).residual_db
        rms.append(float(np.sqrt(np.average(r * r, weights=take.levels.weight))))
    return Estimate(pickup, pickup_sd, plucks, plucks_sd, over,
                    aperture if aperture_fitted else None,
                    float(np.hypot(_sd(cov, -1), contact_sd)) if aperture_fitted else None,
                    fr, fr_sd, q, q_sd, np.array(rms), tuple(dict.fromkeys(n for n in notes if n)))


def _resonance(resonance: tuple[float, float] | None, cov: np.ndarray, layout: Layout, takes: Sequence[TakeModel],
               notes: list[str]) -> tuple[float | None, float | None, float | None, float | None]:
    """(f_r, its sd, Q, its sd) where the partials tell them, else Nones and a note saying why."""
    if resonance is None:
        notes.append("resonance: none seen within the partials")
        return None, None, None, None
    i = layout.size - 2 - (layout.aperture_fixed_mm is None)
    ln_fr_sd, ln_q_sd = _sd(cov, i), _sd(cov, i + 1)
    top = min(float(t.levels.freq_hz[t.levels.weight >= REACH_WEIGHT].max()) for t in takes)
    if resonance[0] > RESONANCE_REACH * top:
        notes.append("resonance: the partials stop below it")
    elif resonance[1] < MIN_REPORTED_Q:
        notes.append("resonance: no peak (Q below 1), its roll-off cannot be told from the tone")
    elif not (ln_fr_sd < MAX_RELATIVE_SD and ln_q_sd < 2.0 * MAX_RELATIVE_SD):
        notes.append("resonance: not resolved by the partials")
    else:
        fr_sd = resonance[0] * float(np.hypot(ln_fr_sd, RESONANCE_MODEL_SD_SHARE))
        return resonance[0], fr_sd, resonance[1], resonance[1] * float(np.hypot(ln_q_sd, Q_MODEL_SD_SHARE))
    return None, None, None, None


__all__ = ["Estimate", "estimate"]
