"""Next runs over choice knobs (``doe next`` when the study has named levels).

A batch of ``K`` runs is proposed in two steps:

1. **Which level combinations.** The runs go one at a time to the
   combinations with the fewest runs so far (ok runs plus pending ones), so
   a plan whose combinations had their share within one keeps it, and one
   that lost runs is topped up first. Among combinations with equally few
   runs, those where one more run gains most by the criterion come first:
   each combination's score is the criterion's best value over its
   candidates (for ``ivr`` the largest drop of the averaged predictive
   variance, for ``variance`` the largest predictive variance, for ``ei``
   the largest expected improvement).
2. **Where within each combination.** The continuous and stepped knobs of
   that combination's runs are chosen by :func:`doe.design.adaptive.propose_runs`
   on the combination's own surrogates: the fitted surrogate over the levels
   with the choice columns held at the combination's levels. Its criteria,
   batch rule (kriging believer), candidate sets and distances apply
   unchanged within the combination; the runs of other combinations are not
   fantasised when a combination's batch is built.

A combination's view of a mixed-input GP (:class:`CombinationGP`) is that GP's
posterior with the choice columns fixed: the same kernel, all runs of every
combination, the same mean and variance (Rasmussen & Williams 2006, eqs.
2.25-2.26). With one GP per combination, the view is that GP.

References
----------
.. [1] Qian, P. Z. G. (2012). Sliced Latin hypercube designs. J. Amer. Statist.
   Assoc. 107(497), 393-399 (runs balanced over the slices).
.. [2] Ginsbourger, D., Le Riche, R. and Carraro, L. (2010). Kriging is well-suited
   to parallelize optimization. Springer, 131-162 (kriging believer).
.. [3] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press.
"""
from __future__ import annotations

import copy

import numpy as np
import pandas as pd
from scipy.linalg import cho_solve, cholesky, solve_triangular
from sklearn.base import clone

from ..checks import is_whole
from ..errors import SurrogateError
from ..surrogate.set import SurrogateSet
from .adaptive import Pick, Proposal, accuracy_status, propose_runs
from .plans import _unit_rows, level_combinations, next_ids

__all__ = ["propose_level_runs", "CombinationGP", "combination_set", "allocate_runs"]


class CombinationGP:
    """One level combination of a fitted :class:`~doe.surrogate.mixed.MixedSurrogate`, over the other knobs.

    It offers what :func:`~doe.design.adaptive.propose_runs` reads of a
    surrogate: ``predict``, ``predict_cov``, ``conditioned``, ``capped``,
    ``X_unit_``, ``y_`` and the scaling. Inputs are the continuous and
    stepped columns in the unit cube; the choice columns are held at
    ``levels``. Predictions are the mixed GP's own (eqs. 2.25-2.26 of [3]).

    Parameters
    ----------
    mixed : MixedSurrogate
        Fitted.
    levels : sequence of int
        Level index of each choice column, in column order.
    loo : LooResult
        Leave-one-out results reported for it (the whole surrogate's).
    """

    fidelity = "single"
    constant_ = False

    def __init__(self, mixed, levels, loo):
        self.mixed, self.levels, self.loo_ = mixed, tuple(int(v) for v in levels), loo
        counts = list(mixed.levels_)
        self._cont = [j for j, n in enumerate(counts) if n == 0]
        self._cat = [j for j, n in enumerate(counts) if n]
        mine = np.all(mixed.X_[:, self._cat] == np.asarray(self.levels, dtype=float), axis=1)
        self.X_unit_, self.y_ = mixed.X_[mine][:, self._cont], mixed.y_[mine]
        self.y_mean_, self.y_std_ = mixed.y_mean_, mixed.y_std_
        self.noise_std_ = float(np.sqrt(mixed.gp_.alpha) * mixed.y_std_)
        self._set(mixed.gp_.kernel_, mixed.gp_.X_train_, mixed.gp_.y_train_)

    def _set(self, kernel, Z, yn) -> None:
        """Kernel, inputs (scaled as the mixed GP's) and normalised values; factorises the kernel matrix."""
        self._kernel, self._Z, self._yn = kernel, Z, yn
        K = kernel(Z) + self.mixed.gp_.alpha * np.eye(len(Z))
        self._L = cholesky(K, lower=True)
        self._a = cho_solve((self._L, True), yn)

    def _full(self, U) -> np.ndarray:
        """Rows of the mixed GP's scaled inputs: continuous columns centred, choice columns at the levels."""
        U = np.atleast_2d(np.asarray(U, dtype=float))
        Z = np.empty((len(U), len(self._cont) + len(self._cat)))
        Z[:, self._cont] = U - 0.5
        Z[:, self._cat] = self.levels
        return Z

    def predict(self, U, return_std=False):
        """Mean (and standard deviation), response unit."""
        Z = self._full(U)
        Ks = self._kernel(Z, self._Z)
        mean = self.y_mean_ + self.y_std_ * (Ks @ self._a)
        if not return_std:
            return mean
        V = solve_triangular(self._L, Ks.T, lower=True)
        var = np.clip(self._kernel.diag(Z) - np.einsum("ij,ij->j", V, V), 0.0, None)
        return mean, np.sqrt(var) * self.y_std_

    def predict_cov(self, UA, UB=None) -> np.ndarray:
        """Posterior covariance between two point sets, response unit squared."""
        ZA = self._full(UA)
        ZB = ZA if UB is None else self._full(UB)
        VA = solve_triangular(self._L, self._kernel(ZA, self._Z).T, lower=True)
        VB = solve_triangular(self._L, self._kernel(ZB, self._Z).T, lower=True)
        return (self._kernel(ZA, ZB) - VA.T @ VB) * self.y_std_**2

    def conditioned(self, U, y=None) -> "CombinationGP":
        """A copy that also knows runs at ``U`` (values: ``y``, by default its mean there: kriging believer [2])."""
        y = self.predict(U) if y is None else np.asarray(y, dtype=float).ravel()
        other = copy.copy(self)
        other._set(self._kernel, np.vstack([self._Z, self._full(U)]),
                   np.concatenate([self._yn, (y - self.y_mean_) / self.y_std_]))
        return other

    def capped(self, max_length_scale: float) -> "CombinationGP":
        """A copy whose continuous length scales (fractions of each range) are at most ``max_length_scale``."""
        kernel = clone(self._kernel)
        scales = np.asarray(kernel.k1.k2.length_scale, dtype=float)
        kernel.set_params(k1__k2__length_scale=np.minimum(scales, max_length_scale))
        other = copy.copy(self)
        other._set(kernel, self._Z, self._yn)
        return other


def _view(model, levels: tuple):
    """A response's surrogate within one level combination (None for a constant response)."""
    if model.constant_:
        return None
    if model.kind_ == "separate":
        return model.model_.models_.get(levels)
    return CombinationGP(model.model_, levels, model.loo_)


def combination_set(sset: SurrogateSet, levels: tuple) -> SurrogateSet:
    """The surrogates of ``sset`` within one level combination, over the continuous and stepped knobs.

    Responses constant over the runs (of the combination, for one GP per combination) are left out.

    Raises
    ------
    SurrogateError
        Per-level surrogates without one for this combination (it has no runs).
    """
    space = sset.space
    models = {}
    for name, model in sset.models.items():
        view = _view(model, levels)
        if view is None and not model.constant_:
            raise SurrogateError(f"level combination {_label(space, levels)} has no runs, so no surrogate of {name} "
                                 "covers it: add runs to it first (doe plan --add-to)")
        if view is not None and not view.constant_:   # constant within the combination: nothing to learn there
            models[name] = view
    return SurrogateSet(space.settable(), models, {n: sset.units[n] for n in models},
                        {n: sset.goals[n] for n in models}, [], sset.target_q2, sset.study_name)


def _label(space, levels) -> str:
    return ", ".join(f"{p.name} {p.levels[i]}" for p, i in zip(space.choices, levels))


def allocate_runs(counts, scores, runs: int) -> np.ndarray:
    """Runs per level combination: each to the combinations with the fewest runs, the higher score first.

    Parameters
    ----------
    counts : array_like of int
        Runs each combination has (ok and pending).
    scores : array_like of float
        What one more run gains there (larger first among equally few runs).
    runs : int

    Returns
    -------
    ndarray of int
        Runs added per combination; ``counts + added`` keeps its share within one when ``counts`` did.
    """
    counts, scores = np.asarray(counts, dtype=int), np.asarray(scores, dtype=float)
    rank = np.argsort(-np.nan_to_num(scores, nan=-np.inf), kind="stable")
    add = np.zeros(len(counts), dtype=int)
    for _ in range(runs):
        total = counts + add
        add[next(t for t in rank if total[t] == total.min())] += 1
    return add


def _rows(space, frame) -> np.ndarray:
    """Unit-cube rows of a plan or results frame (choice columns as level indices)."""
    if frame is None or len(frame) == 0:
        return np.zeros((0, space.dim))
    if isinstance(frame, pd.DataFrame):
        return _unit_rows(space, frame)
    return space.to_unit(frame)


def propose_level_runs(sset: SurrogateSet, runs: int, aim: str = "map", criterion: str | None = None,
                       response: str | None = None, pending=None, avoid=None, taken_ids=(), seed=0) -> Proposal:
    """Propose ``runs`` new runs over a space with choice knobs.

    Parameters
    ----------
    sset : SurrogateSet
        Surrogates over the levels (:class:`~doe.surrogate.levelset.LevelResponseSurrogate`).
    runs : int
    aim, criterion, response
        As for :func:`~doe.design.adaptive.propose_runs`.
    pending, avoid : DataFrame or array_like, optional
        Runs planned but not evaluated, and points not to repeat (failed
        runs): frames with the parameter columns (level names), or arrays in
        study units with level indices in the choice columns.
    taken_ids : iterable of str
        Run ids used besides those the surrogates were fitted on.
    seed : int

    Returns
    -------
    Proposal
        ``frame`` holds level names in the choice columns; each pick's reason
        starts with its level combination and why that combination got it.
    """
    if not is_whole(runs) or runs < 1:
        raise SurrogateError(f"the number of runs to propose must be a whole number >= 1, got {runs!r}")
    space = sset.space
    cols, cont = space.choice_columns, [j for j in range(space.dim) if j not in space.choice_columns]
    combos = level_combinations(space)
    first = next(iter(sset.models.values()))
    P, A = _rows(space, pending), _rows(space, avoid)
    sets, scores, first_picks, counts, named = [], [], [], [], None
    for t, combo in enumerate(combos):
        sub = combination_set(sset, combo)
        sets.append(sub)
        mine = [np.all(X[:, cols] == np.asarray(combo, dtype=float), axis=1) for X in (first.X_unit_, P, A)]
        counts.append(int(mine[0].sum() + mine[1].sum()))
        if not sub.models:
            raise SurrogateError("every response is the same in every run: no criterion can choose runs; add runs "
                                 "with a plan instead (doe plan --add-to)")
        # a combination without ok runs has no best run to improve on: it is mapped first (largest variance)
        blind = aim == "optimum" and not mine[0].any()
        kwargs = dict(aim="map" if blind else aim, criterion="variance" if blind else criterion, response=response,
                      seed=int(seed) + t,
                      pending=space.from_unit(P[mine[1]])[:, cont] if mine[1].any() else None,
                      avoid=space.from_unit(A[mine[2]])[:, cont] if mine[2].any() else None)
        one = propose_runs(sub, 1, **kwargs)
        first_picks.append((one, kwargs))
        named = named if named is not None or blind else one
        scores.append(one.picks[0].score)
    add = allocate_runs(counts, scores, int(runs))
    ids = next_ids(list(sset.run_ids) + list(taken_ids), int(runs))
    frames, picks = [], []
    for t in np.flatnonzero(add):
        one, kwargs = first_picks[t]
        # propose_runs scores stepped knobs on their steps and never repeats a run made, pending, failed or picked
        made = one if add[t] == 1 else propose_runs(sets[t], int(add[t]), **kwargs)
        why = (f"level combination {_label(space, combos[t])}: {counts[t]} run(s) so far, {add[t]} of the "
               f"{runs} proposed go here")
        for pick, (_, row) in zip(made.picks, made.frame.drop(columns="run_id").iterrows()):
            point = {p.name: (p.levels[combos[t][space.choices.index(p)]] if p.levels else float(row[p.name]))
                     for p in space.parameters}
            picks.append(Pick("", point, pick.score, f"{why}; {pick.reason}", pick.predicted))
            frames.append(point)
    order = np.argsort([i for t in np.flatnonzero(add) for i in range(add[t])], kind="stable")
    picks = [picks[i] for i in order]
    for pick, run_id in zip(picks, ids):
        pick.run_id = run_id
    frame = pd.DataFrame([frames[i] for i in order], columns=space.names)
    frame.insert(0, "run_id", ids)
    met, status = accuracy_status(sset)
    named = named or made   # the criterion asked for (a combination without ok runs may have used variance)
    notes = [status, _allocation_note(space, combos, counts, add, named.criterion)]
    if len(P):
        notes.append(f"{len(P)} pending run(s) taken as returning the surrogate's mean (within their combination)")
    return Proposal(frame, picks, aim, named.criterion, named.response, met, notes)


def _allocation_note(space, combos, counts, add, criterion: str) -> str:
    share = ", ".join(f"{_label(space, c)}: {n} + {a}" for c, n, a in zip(combos, counts, add))
    return (f"runs per level combination (so far + proposed): {share}; each run went to a combination with the "
            f"fewest runs, the largest {criterion} score first among equals (balance as in a sliced plan, Qian "
            "2012); within a combination the criterion picked the setting")
