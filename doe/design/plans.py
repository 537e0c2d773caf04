"""Space-filling plans: optimised Latin hypercubes, scrambled Sobol' points,
plans inside constraints, and augmentation of an existing plan.

All engines work in the unit hypercube; :func:`make_plan` and
:func:`augment_plan` convert to the study's units and attach run ids and a
:class:`PlanQuality` record.

References
----------
.. [1] McKay, M. D., Beckman, R. J., Conover, W. J. (1979). A comparison of three
   methods for selecting values of input variables in the analysis of output
   from a computer code. Technometrics 21(2), 239-245.
.. [2] Morris, M. D., Mitchell, T. J. (1995). Exploratory designs for computational
   experiments. J. Statist. Plann. Inference 43, 381-402.
.. [3] Johnson, M. E., Moore, L. M., Ylvisaker, D. (1990). Minimax and maximin
   distance designs. J. Statist. Plann. Inference 26, 131-148.
.. [4] Hickernell, F. J. (1998). A generalized discrepancy and quadrature error
   bound. Math. Comp. 67, 299-322.
.. [5] Loeppky, J. L., Sacks, J., Welch, W. J. (2009). Choosing the sample size of a
   computer experiment: a practical guide. Technometrics 51(4), 366-376.
.. [6] Qian, P. Z. G. (2012). Sliced Latin hypercube designs. J. Amer. Statist.
   Assoc. 107(497), 393-399.
.. [7] Glover, F. (1967). Maximum matching in a convex bipartite graph. Naval
   Res. Logist. Quart. 14(3), 313-316.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd
from scipy.spatial.distance import pdist
from scipy.stats import qmc

from ..errors import PlanError

__all__ = ["PlanQuality", "Plan", "default_runs", "make_plan", "augment_plan", "plan_quality",
           "centered_l2_discrepancy", "phi_p", "maximin_lhs", "sobol_points", "constrained_maximin",
           "greedy_maximin", "run_ids", "RUNS_PER_PARAMETER", "sliced_lhs", "level_combinations"]

#: Default plan size per parameter (Loeppky, Sacks & Welch 2009 [5]).
RUNS_PER_PARAMETER = 10
#: Largest constrained plan made by greedy maximin selection; bigger ones take feasible Sobol' points.
GREEDY_LIMIT = 1000
#: Exponent of the Morris-Mitchell criterion (large p approaches plain maximin [2]).
PHI_P_EXPONENT = 20


def default_runs(dim: int) -> tuple[int, str]:
    """Default number of runs for ``dim`` parameters, with the reason.

    Returns
    -------
    runs : int
    reason : str
    """
    n = max(RUNS_PER_PARAMETER * dim, 4)
    return n, (f"{n} runs: {RUNS_PER_PARAMETER} per parameter, the usual first plan for a Gaussian-process "
               "surrogate (Loeppky, Sacks & Welch 2009)")


def _default_sliced_runs(space) -> tuple[int, str]:
    """Default runs with choice knobs: 10 per continuous or stepped knob, at least 3 per level combination."""
    m, d = len(level_combinations(space)), space.dim - len(space.choices)
    n = max(RUNS_PER_PARAMETER * d, 3 * m)
    n = -(-n // m) * m
    return n, (f"{n} runs: {RUNS_PER_PARAMETER} per continuous or stepped knob (Loeppky, Sacks & Welch 2009), at "
               f"least 3 per level combination, shared evenly over the {m} combinations")


# ---------------------------------------------------------------------------
# criteria
def centered_l2_discrepancy(U) -> float:
    """Squared centred L2 discrepancy of points in the unit hypercube.

    Implements Hickernell's closed form [4] (eq. 5.1b of that paper, as given by
    Fang, Li & Sudjianto 2006, eq. 2.4)::

        CD^2 = (13/12)^d - 2/n sum_i prod_k (1 + |z_ik|/2 - z_ik^2/2)
               + 1/n^2 sum_ij prod_k (1 + |z_ik|/2 + |z_jk|/2 - |x_ik - x_jk|/2)

    with ``z = x - 1/2``.

    Parameters
    ----------
    U : array_like, shape (n, d)
        Points in ``[0, 1]^d``.

    Returns
    -------
    float
        Squared discrepancy (the same quantity as ``scipy.stats.qmc.discrepancy(U, method="CD")``).
    """
    U = np.asarray(U, dtype=float)
    n, d = U.shape
    z = np.abs(U - 0.5)
    term1 = (13.0 / 12.0) ** d
    term2 = np.prod(1 + 0.5 * z - 0.5 * z**2, axis=1).sum() * 2.0 / n
    diff = np.abs(U[:, None, :] - U[None, :, :]) if n <= 2000 else None
    if diff is not None:
        term3 = np.prod(1 + 0.5 * z[:, None, :] + 0.5 * z[None, :, :] - 0.5 * diff, axis=2).sum() / n**2
    else:  # row blocks keep memory bounded for big plans
        term3 = 0.0
        for s in range(0, n, 500):
            b = slice(s, s + 500)
            dd = np.abs(U[b, None, :] - U[None, :, :])
            term3 += np.prod(1 + 0.5 * z[b, None, :] + 0.5 * z[None, :, :] - 0.5 * dd, axis=2).sum()
        term3 /= n**2
    return float(term1 - term2 + term3)


def phi_p(U, p: int = PHI_P_EXPONENT, groups=None) -> float:
    """Morris-Mitchell space-filling criterion ``(sum_{i<j} d_ij^-p)^(1/p)`` [2]; smaller is better.

    With ``groups`` (one label per run) a pair within a group counts twice: the
    whole plan's criterion plus each group's own (as in sliced plans).
    """
    d = pdist(np.asarray(U, dtype=float))
    if np.any(d == 0):
        return math.inf
    w = 1.0
    if groups is not None:
        i, j = np.triu_indices(len(groups), 1)   # the pair order of pdist
        w = 1.0 + (np.asarray(groups)[i] == np.asarray(groups)[j])
    m = d.min()
    return float((np.sum(w * (m / d) ** p)) ** (1.0 / p) / m)


@dataclass
class PlanQuality:
    """How well a plan fills its space (all measured in the unit hypercube).

    Attributes
    ----------
    runs : int
    min_distance : float
        Smallest distance between two runs (larger is better; maximin [3]).
    cd2 : float
        Squared centred L2 discrepancy (smaller is better [4]).
    max_abs_correlation : float
        Largest absolute Pearson correlation between two parameter columns.
    latin : bool
        Whether every column has exactly one run per stratum of width 1/n [1].
    notes : list of str
    """

    runs: int
    min_distance: float
    cd2: float
    max_abs_correlation: float
    latin: bool
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return asdict(self)

    def summary(self) -> str:
        """Plan quality in one line."""
        return (f"{self.runs} runs; min distance {self.min_distance:.4f} (unit cube), "
                f"centred L2 discrepancy^2 {self.cd2:.5f}, max |correlation| {self.max_abs_correlation:.3f}, "
                f"Latin: {'yes' if self.latin else 'no'}")


def is_latin(U) -> bool:
    """Whether floor(n u) is a permutation of 0..n-1 in every column [1]."""
    U = np.asarray(U, dtype=float)
    n = len(U)
    strata = np.clip(np.floor(U * n).astype(int), 0, n - 1)
    return all(np.array_equal(np.sort(strata[:, j]), np.arange(n)) for j in range(U.shape[1]))


def plan_quality(U, notes=()) -> PlanQuality:
    """Measure a plan given in the unit hypercube."""
    U = np.asarray(U, dtype=float)
    n, d = U.shape
    mind = float(pdist(U).min()) if n > 1 else math.nan
    if d > 1 and n > 2:
        with np.errstate(invalid="ignore", divide="ignore"):
            c = np.corrcoef(U, rowvar=False)
        off = np.abs(c[~np.eye(d, dtype=bool)])
        corr = float(np.nanmax(off)) if off.size else 0.0
    else:
        corr = 0.0
    return PlanQuality(n, mind, centered_l2_discrepancy(U), corr, is_latin(U), list(notes))


# ---------------------------------------------------------------------------
# engines (unit hypercube)
def maximin_lhs(n: int, d: int, seed=None, iterations: int | None = None) -> np.ndarray:
    """A Latin hypercube optimised for space filling by element exchanges.

    Starts from ``scipy.stats.qmc.LatinHypercube`` and swaps two values within a
    column whenever that lowers the Morris-Mitchell criterion ``phi_p`` [2]; a
    swap keeps the one-run-per-stratum property of every column [1].

    Parameters
    ----------
    n, d : int
        Runs and parameters.
    seed : int or numpy.random.Generator
    iterations : int, optional
        Swaps tried; default ``min(15 n d, 20000)``.

    Returns
    -------
    ndarray, shape (n, d)
    """
    rng = np.random.default_rng(seed)
    U = qmc.LatinHypercube(d, seed=rng).random(n)
    if n < 3:
        return U
    iterations = iterations if iterations is not None else min(15 * n * d, 20000)
    return _exchange(U, rng, iterations)


def _exchange(U: np.ndarray, rng, iterations: int, groups: np.ndarray | None = None,
              movable: np.ndarray | None = None) -> np.ndarray:
    """Swap two values within a column whenever that lowers ``phi_p`` [2] (in place; returns ``U``).

    Without ``groups`` any two runs may swap and every pair counts once. With
    ``groups`` (one label per run) only runs of the same group swap, so each
    group keeps its strata, and a pair within a group counts twice: the
    criterion is the whole plan's plus each group's own. With ``movable`` (a
    boolean per run, needs ``groups``) only those runs swap; the others stay
    as they are but still count in the criterion (augmentation).
    """
    n, d = U.shape
    p = PHI_P_EXPONENT
    D = np.sqrt(((U[:, None, :] - U[None, :, :]) ** 2).sum(-1)) if n <= 3000 else None
    if D is None or not np.any(D > 0):  # huge plans: skip optimisation, the random LHS is already stratified
        return U
    scale = D[D > 0].min()
    with np.errstate(divide="ignore"):
        W = (scale / D) ** p
    M = None
    if groups is not None:
        M = 1.0 + (groups[:, None] == groups[None, :])
        W *= M
        can = np.ones(n, dtype=bool) if movable is None else np.asarray(movable, dtype=bool)
        members = [np.flatnonzero((groups == g) & can) for g in np.unique(groups)]
        members = [m for m in members if len(m) >= 2]
        if not members:
            return U
        weight = np.array([len(m) for m in members], dtype=float)
        weight /= weight.sum()
    np.fill_diagonal(W, 0.0)
    for _ in range(iterations):
        j = rng.integers(d)
        if M is None:
            a, b = rng.choice(n, 2, replace=False)
        else:
            a, b = rng.choice(members[rng.choice(len(members), p=weight)], 2, replace=False)
        new = U[[a, b]].copy()
        new[0, j], new[1, j] = U[b, j], U[a, j]
        da = np.sqrt(((U - new[0]) ** 2).sum(1))
        db = np.sqrt(((U - new[1]) ** 2).sum(1))
        da[[a, b]] = np.inf
        db[[a, b]] = np.inf
        with np.errstate(divide="ignore"):
            wa, wb = (scale / da) ** p, (scale / db) ** p
        if M is not None:
            wa, wb = wa * M[a], wb * M[b]
        old = W[a].sum() + W[b].sum() - 2 * W[a, b]
        if wa.sum() + wb.sum() < old:  # the a-b distance does not change under the swap
            U[a, j], U[b, j] = new[0, j], new[1, j]
            wab = W[a, b]
            W[a], W[:, a] = wa, wa
            W[b], W[:, b] = wb, wb
            W[a, b] = W[b, a] = wab
            W[a, a] = W[b, b] = 0.0
    return U


def sliced_lhs(sizes, d: int, seed=None) -> tuple[np.ndarray, np.ndarray]:
    """A sliced Latin hypercube: slices that are Latin on their own and together.

    With ``n = sum(sizes)`` runs, every column of the whole design has one run in
    each of the ``n`` strata of width ``1/n``, and every column of slice ``t``
    has one run in each of its ``sizes[t]`` strata of width ``1/sizes[t]``
    (Qian 2012 [6]). For equal slices this is Qian's construction: the ``m``
    fine strata inside each coarse stratum are dealt out to the ``m`` slices at
    random. Unequal slices (sizes differing by one, when the runs do not divide
    evenly) are dealt the same way by a matching of fine strata to the slices'
    coarse strata that overlap them, found by Glover's rule [7] (earliest-ending
    coarse stratum first, ties at random); it always exists because every set
    of fine strata overlaps at least as many coarse strata as it has members.

    Parameters
    ----------
    sizes : sequence of int
        Runs per slice, each at least 1.
    d : int
        Columns.
    seed : int or numpy.random.Generator

    Returns
    -------
    U : ndarray, shape (n, d)
        Points in ``[0, 1)^d``, slice by slice (the first ``sizes[0]`` rows are slice 0, ...).
    slice_of : ndarray of int, shape (n,)
        The slice of each row.
    """
    rng = np.random.default_rng(seed)
    sizes = [int(s) for s in sizes]
    if not sizes or min(sizes) < 1:
        raise PlanError(f"every slice needs at least one run, got sizes {sizes}")
    n = sum(sizes)
    slots = [(t, k) for t, size in enumerate(sizes) for k in range(size)]
    start = np.cumsum([0] + sizes[:-1])
    U = np.empty((n, d))
    for j in range(d):
        tie = rng.random(n)
        lo, hi, matched = _match_strata(slots, sizes, n, range(n), tie)
        if not matched.all():  # pragma: no cover - excluded by Hall's condition (see above)
            raise PlanError("internal error: no coarse stratum left for a fine stratum of the sliced plan")
        value = lo + rng.random(n) * (hi - lo)
        for t, size in enumerate(sizes):  # the runs of a slice take its coarse strata in random order
            U[start[t]:start[t] + size, j] = value[start[t] + rng.permutation(size)]
    return U, np.repeat(np.arange(len(sizes)), sizes)


def _match_strata(slots, sizes, n: int, fine, tie):
    """Deal free fine strata ``[i/n, (i+1)/n)`` to coarse strata ``(t, k)`` = ``[k/sizes[t], (k+1)/sizes[t])``.

    Glover's rule [7]: fine strata in increasing order, each to the open coarse
    stratum it overlaps that ends first (ties by ``tie``); this matches as many
    coarse strata as any rule can (the overlaps form a convex bipartite graph).

    Returns
    -------
    lo, hi : ndarray
        Per coarse stratum, the part shared with its fine stratum (its own bounds when it got none).
    matched : ndarray of bool
    """
    # fine stratum i meets coarse stratum k of slice t when k n < (i+1) s and (k+1) n > i s
    first = np.array([(k * n) // sizes[t] for t, k in slots], dtype=int)
    last = np.array([-(-((k + 1) * n) // sizes[t]) - 1 for t, k in slots], dtype=int)
    lo = np.array([k / sizes[t] for t, k in slots], dtype=float)
    hi = np.array([(k + 1) / sizes[t] for t, k in slots], dtype=float)
    free = np.ones(len(slots), dtype=bool)
    for i in fine:
        open_ = np.flatnonzero(free & (first <= i) & (last >= i))
        if open_.size == 0:
            continue
        q = open_[np.lexsort((tie[open_], last[open_]))[0]]
        free[q] = False
        lo[q], hi[q] = max(i / n, lo[q]), min((i + 1) / n, hi[q])
    return lo, hi, ~free


def level_combinations(space) -> list:
    """Every combination of the levels of the choice knobs, as tuples of level indices (one per choice knob)."""
    return list(itertools.product(*(range(len(p.levels)) for p in space.choices)))


def _slice_sizes(runs: int, slices: int, rng) -> list:
    """``runs`` dealt to ``slices``: each gets ``runs // slices``, a random ``runs % slices`` of them one more."""
    sizes = [runs // slices] * slices
    for t in rng.choice(slices, runs % slices, replace=False):
        sizes[t] += 1
    return sizes


def sliced_plan(space, runs: int, seed=None) -> tuple[np.ndarray, list]:
    """A plan over choice knobs: one slice of runs per combination of levels [6].

    The runs are shared out over the level combinations (each gets its share,
    within one run). Without constraints the continuous and stepped knobs
    form a sliced Latin hypercube (:func:`sliced_lhs`) improved by swaps
    within slices (:func:`_exchange`), so each slice and the whole plan keep
    one run per stratum; with constraints each slice is a maximin selection of
    feasible points. Runs are listed slice after slice in turn, so a plan
    stopped early is still close to balanced.

    Returns
    -------
    U : ndarray, shape (runs, dim)
        Unit-cube points of the whole space (choice columns hold level indices).
    notes : list of str
    """
    rng = np.random.default_rng(seed)
    combos = level_combinations(space)
    m = len(combos)
    if runs < m:
        raise PlanError(f"{runs} runs cannot cover the {m} combinations of levels of "
                        f"{', '.join(p.name for p in space.choices)}; give at least {m} runs")
    sub = space.settable()
    sizes = _slice_sizes(runs, m, rng)
    share = f"{runs // m}" + (f" or {runs // m + 1}" if runs % m else "")
    notes = [f"{m} level combinations of {', '.join(p.name for p in space.choices)}, {share} runs each"]
    if sub.constraints:
        sub.check_feasible()
        parts = [constrained_maximin(sub, size, rng)[0] for size in sizes]
        V, slice_of = np.vstack(parts), np.repeat(np.arange(m), sizes)
        notes.append(f"constraints cut the box ({sub.feasible_fraction():.0%} of it is feasible): each level "
                     "combination is a maximin selection of feasible points, so the one-run-per-stratum (Latin) "
                     "property does not hold in general")
    else:
        V, slice_of = sliced_lhs(sizes, sub.dim, rng)
        if runs >= 3:
            _exchange(V, rng, min(15 * runs * sub.dim, 20000), groups=slice_of)
        notes.append("sliced Latin hypercube (Qian 2012): one run per stratum within each level combination and "
                     "over the whole plan")
    if any(p.values for p in sub.parameters):
        notes.append("stepped knobs are put on their steps, so their columns repeat values")
    order = _round_robin(sizes, slice_of)
    U = np.empty((runs, space.dim))
    cont = [j for j in range(space.dim) if j not in space.choice_columns]
    U[:, cont] = V[order]
    U[:, space.choice_columns] = np.array(combos, dtype=float)[slice_of[order]]
    return U, notes


def _round_robin(sizes, slice_of) -> np.ndarray:
    """Row order taking one run of each slice in turn (rows listed slice by slice, ``sizes[t]`` of slice ``t``)."""
    rank = np.concatenate([np.arange(s) for s in sizes])
    return np.argsort(rank * len(sizes) + slice_of, kind="stable")


def sobol_points(n: int, d: int, seed=None) -> tuple[np.ndarray, list]:
    """Scrambled Sobol' points (``scipy.stats.qmc.Sobol``) with a note when n is not a power of two."""
    notes = []
    if n & (n - 1):
        notes.append(f"{n} is not a power of two: a Sobol' plan keeps its balance properties only at 2^m runs")
    engine = qmc.Sobol(d, scramble=True, seed=np.random.default_rng(seed))
    m = int(math.ceil(math.log2(max(n, 2))))
    return engine.random_base2(m)[:n], notes


def candidates(space, count: int, rng) -> np.ndarray:
    """Feasible candidate points in the unit cube (scrambled Sobol', then rejection)."""
    m = int(math.ceil(math.log2(max(count, 64))))
    U = qmc.Sobol(space.dim, scramble=True, seed=rng).random_base2(m)
    ok = space.feasible_unit(U)
    if not ok.any():
        space.check_feasible()
        raise PlanError("the constraints leave too little room for a plan; check them")
    return U[ok]


def greedy_maximin(candidates: np.ndarray, k: int, existing: np.ndarray | None = None, rng=None) -> np.ndarray:
    """Pick ``k`` candidates one at a time, each farthest from all points so far [3].

    Parameters
    ----------
    candidates : ndarray, shape (m, d)
    k : int
    existing : ndarray, shape (e, d), optional
        Points that stay (augmentation). Without them the first pick is random.

    Returns
    -------
    ndarray, shape (k, d)
        The chosen points, in the order they were picked.
    """
    rng = np.random.default_rng(rng)
    if k > len(candidates):
        raise PlanError(f"asked for {k} runs but only {len(candidates)} candidate points are feasible")
    chosen = []
    if existing is not None and len(existing):
        dmin = np.min(np.sqrt(((candidates[:, None, :] - existing[None, :, :]) ** 2).sum(-1)), axis=1)
    else:
        first = int(rng.integers(len(candidates)))
        chosen.append(first)
        dmin = np.sqrt(((candidates - candidates[first]) ** 2).sum(1))
    while len(chosen) < k:
        i = int(np.argmax(dmin))
        chosen.append(i)
        dmin = np.minimum(dmin, np.sqrt(((candidates - candidates[i]) ** 2).sum(1)))
    return candidates[chosen]


def constrained_maximin(space, n: int, seed=None) -> tuple[np.ndarray, list]:
    """A space-filling plan inside linear constraints.

    Greedy maximin selection [3] from a dense feasible set of scrambled Sobol'
    points, then point exchanges that raise the smallest distance.

    Returns
    -------
    U : ndarray, shape (n, d)
    notes : list of str
        States that one-run-per-stratum does not hold in general under constraints.
    """
    rng = np.random.default_rng(seed)
    share = f"constraints cut the box ({space.feasible_fraction():.0%} of it is feasible)"
    if n > GREEDY_LIMIT:
        # Greedy selection costs n x candidates distance evaluations; for big plans the feasible
        # points of one scrambled Sobol' sequence, in sequence order, fill the space well enough.
        C = candidates(space, int(n / max(space.feasible_fraction(), 1e-3) * 1.2) + 64, rng)
        if len(C) < n:
            raise PlanError(f"asked for {n} runs but only {len(C)} candidate points are feasible")
        return C[:n], [f"{share}: the plan is the feasible part of a scrambled Sobol' sequence (more than "
                       f"{GREEDY_LIMIT} runs), so the one-run-per-stratum (Latin) property does not hold"]
    C = candidates(space, min(max(64 * n, 4096), 65536), rng)
    U = greedy_maximin(C, n, rng=rng)
    notes = [f"{share}: the plan is a maximin selection of feasible points, so the one-run-per-stratum (Latin) "
             "property does not hold in general"]
    return U, notes


def run_ids(n: int, start: int = 1, prefix: str = "r") -> list:
    """Run ids ``r001``, ``r002``, ... (zero-padded to at least 3 digits)."""
    width = max(3, len(str(start + n - 1)))
    return [f"{prefix}{i:0{width}d}" for i in range(start, start + n)]


# ---------------------------------------------------------------------------
@dataclass
class Plan:
    """A plan in the study's units with its quality record.

    Attributes
    ----------
    frame : DataFrame
        ``run_id`` then one column per parameter (study units).
    quality : PlanQuality
    method : str
    seed : int
    """

    frame: pd.DataFrame
    quality: PlanQuality
    method: str
    seed: int

    def to_dict(self) -> dict:
        """What is written beside the plan CSV as JSON."""
        return {"method": self.method, "seed": self.seed, "quality": self.quality.to_dict(),
                "units": "distances and discrepancy measured on parameters scaled to [0, 1]"}


def _frame(space, U, ids) -> pd.DataFrame:
    X = space.from_unit(U)
    X = np.clip(X, space.lower, space.upper)
    frame = pd.DataFrame(X, columns=space.names)
    for p in space.choices:
        frame[p.name] = [p.levels[int(i)] for i in frame[p.name]]
    frame.insert(0, "run_id", ids)
    return frame


def _onto_steps(space, U: np.ndarray) -> np.ndarray:
    """Stepped columns moved onto their values by equal shares of ``[0, 1]`` (value k takes ``[k/K, (k+1)/K)``).

    Rounding to the nearest value would give the end values half a share; equal
    shares keep a Latin column balanced over the values (each within one run of
    ``n/K``). Only for plans without constraints: under constraints the
    feasibility of each candidate was judged at its nearest step.
    """
    U = U.copy()
    for j, p in enumerate(space.parameters):
        if p.values:
            k = np.clip(np.floor(U[:, j] * len(p.values)).astype(int), 0, len(p.values) - 1)
            U[:, j] = (np.asarray(p.values)[k] - p.low) / p.span
    return U


def _settable_quality(space, U, notes) -> PlanQuality:
    """Quality of a plan measured on its continuous and stepped knobs, as set (stepped ones rounded)."""
    cont = [j for j in range(space.dim) if j not in space.choice_columns]
    sub = space.settable()
    return plan_quality(sub.to_unit(sub.from_unit(U[:, cont])), notes)


def make_plan(space, runs: int | None = None, seed: int = 0, method: str = "lhs") -> Plan:
    """A first plan for a design space.

    Parameters
    ----------
    space : Space
    runs : int, optional
        Number of runs; default 10 per parameter [5].
    seed : int
        Same seed, same plan.
    method : {"lhs", "sobol"}
        ``lhs``: Latin hypercube optimised by maximin exchanges [1, 2];
        ``sobol``: scrambled Sobol' points. With constraints both become a
        maximin selection of feasible points.

    Returns
    -------
    Plan
    """
    notes = []
    if runs is None:
        runs, reason = default_runs(space.dim) if not space.choices else _default_sliced_runs(space)
        notes.append(reason)
    if runs < 2:
        raise PlanError(f"a plan needs at least 2 runs, got {runs}")
    if method not in ("lhs", "sobol"):
        raise PlanError(f"unknown plan method {method!r}; use 'lhs' or 'sobol'")
    if runs < space.dim + 1:
        notes.append(f"only {runs} runs for {space.dim} parameters: too few to fit a surrogate")
    if space.choices:
        if method != "lhs":
            raise PlanError(f"plan method {method!r} does not take choice knobs; use 'lhs' (a sliced Latin hypercube)")
        U, more = sliced_plan(space, runs, seed)
        U = U if space.constraints else _onto_steps(space, U)
        return Plan(_frame(space, U, run_ids(runs)), _settable_quality(space, U, notes + more), "sliced_lhs", seed)
    if space.constraints:
        space.check_feasible()
        U, more = constrained_maximin(space, runs, seed)
    elif method == "lhs":
        U, more = maximin_lhs(runs, space.dim, seed), []
    else:
        U, more = sobol_points(runs, space.dim, seed)
    notes += more
    if any(p.values for p in space.parameters):
        notes.append("stepped knobs are put on their steps, so their columns repeat values")
        U = U if space.constraints else _onto_steps(space, U)
        return Plan(_frame(space, U, run_ids(runs)), _settable_quality(space, U, notes), method, seed)
    return Plan(_frame(space, U, run_ids(runs)), plan_quality(U, notes), method, seed)


def augment_plan(space, existing: pd.DataFrame, runs: int, seed: int = 0) -> Plan:
    """Add ``runs`` runs to an existing plan so that the whole set stays space-filling.

    The old runs are kept as they are; each new run is the feasible candidate
    farthest from every run so far (greedy maximin [3]). With choice knobs the
    new runs top up the level combinations and keep the plan sliced
    (:func:`_augment_sliced`).

    Parameters
    ----------
    space : Space
    existing : DataFrame
        The plan so far (``run_id`` and parameter columns, study units).
    runs : int
        Runs to add.
    seed : int

    Returns
    -------
    Plan
        Old and new runs together; new run ids continue the old numbering.
    """
    if runs < 1:
        raise PlanError(f"the number of runs to add must be at least 1, got {runs}")
    if space.choices:
        return _augment_sliced(space, existing, runs, seed)
    rng = np.random.default_rng(seed)
    U0 = space.to_unit(existing[space.names].to_numpy(dtype=float))
    C = candidates(space, min(max(64 * (len(U0) + runs), 4096), 65536), rng)
    new = greedy_maximin(C, runs, existing=U0, rng=rng)
    U = np.vstack([U0, new])
    ids = next_ids(list(existing["run_id"]), runs)
    frame = pd.concat([existing[["run_id", *space.names]].reset_index(drop=True), _frame(space, new, ids)],
                      ignore_index=True)
    notes = [f"{len(U0)} runs kept, {runs} added by greedy maximin selection"]
    return Plan(frame, plan_quality(U, notes), "augment", seed)


def next_ids(old: list, runs: int) -> list:
    """``runs`` new run ids after those in ``old`` (``r<n>``, numbered on from the largest)."""
    nums = [int(r[1:]) for r in old if r.startswith("r") and r[1:].isdigit()]
    start = max(nums, default=0) + 1
    ids = run_ids(runs, start)
    taken = set(old)
    if taken & set(ids):  # pragma: no cover - only with hand-made ids that collide
        ids = run_ids(runs, start, prefix="a")
    return ids


# ---------------------------------------------------------------------------
# augmentation with choice knobs
def _unit_rows(space, frame: pd.DataFrame) -> np.ndarray:
    """A plan's parameter columns in the unit cube; choice columns (level names or indices) as level indices."""
    X = np.empty((len(frame), space.dim))
    for j, p in enumerate(space.parameters):
        column = frame[p.name]
        X[:, j] = ([p.level_index(v) if isinstance(v, str) else float(v) for v in column] if p.levels
                   else column.to_numpy(dtype=float))
    return space.to_unit(X)


def _top_up(counts: np.ndarray, runs: int, rng) -> np.ndarray:
    """``runs`` new runs dealt one at a time to the slices with the fewest runs so far (ties at random)."""
    add = np.zeros(len(counts), dtype=int)
    for _ in range(runs):
        total = counts + add
        add[rng.choice(np.flatnonzero(total == total.min()))] += 1
    return add


def _to_shares(space, V: np.ndarray) -> np.ndarray:
    """Stepped columns moved to the middle of their value's share of ``[0, 1]`` (the inverse of :func:`_onto_steps`)."""
    V = V.copy()
    for j, p in enumerate(space.parameters):
        if p.values:
            k = np.argmin(np.abs(space.lower[j] + V[:, j, None] * p.span - np.asarray(p.values)[None, :]), axis=1)
            V[:, j] = (k + 0.5) / len(p.values)
    return V


def _extend_sliced(V0: np.ndarray, old_slice: np.ndarray, add: np.ndarray, rng) -> tuple[np.ndarray, np.ndarray]:
    """New runs that make a sliced Latin hypercube bigger wherever the old runs allow it [6].

    With ``N`` runs in the end and ``S_t`` in slice ``t``, each new run of
    slice ``t`` takes a stratum of width ``1/S_t`` that no old run of its slice
    holds, and within it, where it can, a stratum of width ``1/N`` that no run
    of the whole plan holds (Glover's matching [7], as in :func:`sliced_lhs`).
    When the old plan is a sliced Latin hypercube and every slice doubles, or
    more generally when the old runs hold distinct strata at the new sizes,
    the whole plan and every slice come out Latin again; otherwise the strata
    left free are filled and the rest fall where their slice's stratum allows.

    Returns
    -------
    V : ndarray, shape (sum(add), d)
        The new runs, slice by slice.
    new_slice : ndarray of int
    """
    n0, d = V0.shape
    m = len(add)
    sizes = np.bincount(old_slice, minlength=m) + add
    N = int(sizes.sum())
    new_slice = np.repeat(np.arange(m), add)
    V = np.empty((len(new_slice), d))
    for j in range(d):
        held = set(np.clip(np.floor(V0[:, j] * N).astype(int), 0, N - 1))
        slots = []
        for t in np.flatnonzero(add):
            own = set(np.clip(np.floor(V0[old_slice == t, j] * sizes[t]).astype(int), 0, sizes[t] - 1))
            empty = [k for k in range(sizes[t]) if k not in own]
            slots += [(t, int(k)) for k in np.sort(rng.choice(empty, add[t], replace=False))]
        lo, hi, _ = _match_strata(slots, sizes, N, [i for i in range(N) if i not in held], rng.random(len(slots)))
        value = lo + rng.random(len(slots)) * (hi - lo)
        for t in np.flatnonzero(add):  # the new runs of a slice take its free strata in random order
            rows = np.flatnonzero(new_slice == t)
            V[rows, j] = value[rows[rng.permutation(len(rows))]]
    return V, new_slice


#: Random sliced extensions tried by :func:`_best_extension` (each improved by swaps; the best is kept).
EXTENSION_TRIES = 8


def _best_extension(V0: np.ndarray, old_slice: np.ndarray, add: np.ndarray, rng) -> tuple[np.ndarray, np.ndarray]:
    """The best of :data:`EXTENSION_TRIES` sliced extensions (:func:`_extend_sliced`), each improved by swaps
    among the new runs of each slice (:func:`_exchange`), by the Morris-Mitchell criterion [2] of the whole
    plan plus each slice's own (pairs within a slice count twice, as in the swaps).

    Returns
    -------
    W : ndarray, shape (len(V0) + sum(add), d)
        Old runs, then the new ones slice by slice.
    new_slice : ndarray of int
    """
    n0, d = V0.shape
    iterations = max(min(15 * (n0 + int(add.sum())) * d, 20000) // EXTENSION_TRIES, 100)
    best, best_value = None, np.inf
    for _ in range(EXTENSION_TRIES):
        V, new_slice = _extend_sliced(V0, old_slice, add, rng)
        W = np.vstack([V0, V])
        groups = np.concatenate([old_slice, new_slice])
        _exchange(W, rng, iterations, groups=groups, movable=np.arange(len(W)) >= n0)
        value = phi_p(W, groups=groups)
        if value < best_value or best is None:
            best, best_value = (W, new_slice), value
    return best


def _add_feasible(space, V0: np.ndarray, old_slice: np.ndarray, add: np.ndarray, rng) -> tuple:
    """New feasible runs, one slice at a time in turn, each far from its slice's runs and from all runs.

    Each pick is the feasible candidate with the largest ``min(d_slice / h_slice,
    d_all / h_all)``: its distances to the nearest run of its slice and of the
    whole plan, each over ``n^(-1/d)``, the spacing of ``n`` evenly spread runs
    in the unit cube (greedy maximin [3] over both at once).

    Returns
    -------
    V : ndarray, shape (sum(add), d)
        The new runs, in the order picked.
    new_slice : ndarray of int
    """
    n0, d = V0.shape
    m = len(add)
    counts = np.bincount(old_slice, minlength=m)
    C = candidates(space, min(max(64 * (n0 + int(add.sum())), 4096), 65536), rng)
    near_all = np.full(len(C), np.inf)
    near_own = np.full((m, len(C)), np.inf)
    for s in range(0, n0, 256):
        dist = np.sqrt(((C[:, None, :] - V0[None, s:s + 256, :]) ** 2).sum(-1))
        near_all = np.minimum(near_all, dist.min(axis=1))
        for t in range(m):
            mine = old_slice[s:s + 256] == t
            if mine.any():
                near_own[t] = np.minimum(near_own[t], dist[:, mine].min(axis=1))
    new_slice = np.repeat(np.arange(m), add)[_round_robin(add, np.repeat(np.arange(m), add))]
    V = np.empty((len(new_slice), d))
    total = n0
    for r, t in enumerate(new_slice):
        counts[t] += 1
        total += 1
        score = np.minimum(near_own[t] * counts[t] ** (1 / d), near_all * total ** (1 / d))
        i = int(np.argmax(score))
        if not np.isfinite(score[i]) and np.isinf(near_all).all():
            i = int(rng.integers(len(C)))
        V[r] = C[i]
        dist = np.sqrt(((C - C[i]) ** 2).sum(1))
        near_all, near_own[t] = np.minimum(near_all, dist), np.minimum(near_own[t], dist)
    return V, new_slice


def _augment_sliced(space, existing: pd.DataFrame, runs: int, seed: int) -> Plan:
    """:func:`augment_plan` with choice knobs: top up the level combinations, keep every slice space-filling.

    The new runs go one at a time to the level combinations with the fewest
    runs (ties at random), so a plan whose combinations had their share within
    one keeps it. Without constraints the continuous and stepped knobs of the
    new runs extend the sliced Latin hypercube (:func:`_extend_sliced`, Qian
    2012 [6]) and are then improved by swaps among the new runs of each slice
    (:func:`_exchange`); with constraints they are greedy maximin picks of
    feasible points (:func:`_add_feasible`). Stepped knobs end on their values.
    """
    rng = np.random.default_rng(seed)
    combos = level_combinations(space)
    m = len(combos)
    U0 = _unit_rows(space, existing)
    cols = space.choice_columns
    cont = [j for j in range(space.dim) if j not in cols]
    where_ = {c: t for t, c in enumerate(combos)}
    old_slice = np.array([where_[tuple(int(v) for v in row)] for row in U0[:, cols]], dtype=int).reshape(-1)
    add = _top_up(np.bincount(old_slice, minlength=m), runs, rng)
    sub = space.settable()
    if sub.constraints:
        sub.check_feasible()
        V, new_slice = _add_feasible(sub, U0[:, cont], old_slice, add, rng)
        how = ("constraints cut the box: the new runs are maximin picks of feasible points, far from their level "
               "combination's runs and from all runs, so the one-run-per-stratum (Latin) property does not hold")
    else:
        V0 = _to_shares(sub, U0[:, cont])
        W, new_slice = _best_extension(V0, old_slice, add, rng)
        order = _round_robin(add, new_slice)
        V, new_slice = _onto_steps(sub, W[len(V0):])[order], new_slice[order]
        how = ("the new runs extend the sliced Latin hypercube (Qian 2012): each takes a stratum its level "
               "combination and the whole plan leave free, where the old runs allow")
    U = np.empty((runs, space.dim))
    U[:, cont] = V
    U[:, cols] = np.array(combos, dtype=float)[new_slice]
    ids = next_ids(list(existing["run_id"]), runs)
    frame = pd.concat([existing[["run_id", *space.names]].reset_index(drop=True), _frame(space, U, ids)],
                      ignore_index=True)
    final = np.bincount(old_slice, minlength=m) + add
    share = f"{final.min()}" + (f" to {final.max()}" if final.max() > final.min() else "")
    notes = [f"{len(U0)} runs kept, {runs} added to the level combinations with the fewest runs: {share} runs "
             f"per combination of {', '.join(p.name for p in space.choices)}", how]
    if any(p.values for p in sub.parameters):
        notes.append("stepped knobs are put on their steps, so their columns repeat values")
    return Plan(frame, _settable_quality(space, np.vstack([U0, U]), notes), "augment", seed)
