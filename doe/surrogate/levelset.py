"""One response's surrogate over a space with choice knobs, in the shape a surrogate set expects.

:func:`~doe.surrogate.mixed.best_level_surrogate` fits the mixed-input GP and
one GP per level combination and keeps the one with the smaller leave-one-out
error. :class:`LevelResponseSurrogate` wraps the one kept so that
:class:`~doe.surrogate.set.SurrogateSet`, ``fit.json``, the verdicts, the
Sobol indices and the robust search use it like any other response: inputs
are rows of :meth:`doe.space.Space.to_unit` (continuous and stepped columns in
the unit cube, choice columns as level indices).

Stepped knobs are continuous columns here (the GP interpolates between
steps); a setting proposed from the surrogate is snapped to its steps by
:meth:`doe.space.Space.from_unit`.

The kept model's mean is the fitted one; its band is widened by
:mod:`doe.surrogate.levelbands` (the kernel settings, level correlations
included, sampled from their posterior, and the leave-one-out errors; the
larger factor is kept), because the fitted (plug-in) band is too narrow with
the few runs per level combination a study has (measured in
``benchmarks/bench_mixed.py``). The sample paths are widened with it, so
``q2_low``, the Sobol intervals and the robust search carry the wider band;
the ``ready`` verdict asks the same two things as for other responses.

References
----------
Qian, Wu & Wu (2008); Zhou, Qian & Zhou (2011); Roustant et al. (2020); see
:mod:`doe.surrogate.mixed`.
"""
from __future__ import annotations

import re
import time

import numpy as np
from scipy.stats import qmc

from ..errors import SurrogateError
from .mixed import MixedSurrogate, SeparateSurrogates, best_level_surrogate

__all__ = ["LevelResponseSurrogate", "level_unit_sample", "KIND"]

#: Value of ``surrogate`` in a saved response record of this kind.
KIND = "levels"
#: Check points (a scrambled Sobol' sample over the levels) at which the band's widening is measured.
CHECK_POINTS = 128


def level_unit_sample(levels, n: int, seed=0) -> np.ndarray:
    """A scrambled Sobol' sample of ``n`` rows in the inputs of a level surrogate.

    Continuous columns uniform in ``[0, 1]``; each choice column of ``L``
    levels holds ``floor(L u)``, so every level is equally likely.
    """
    U = qmc.Sobol(len(levels), scramble=True, seed=seed).random(n)
    for j, n_levels in enumerate(levels):
        if n_levels:
            U[:, j] = np.minimum(np.floor(n_levels * U[:, j]), n_levels - 1)
    return U


class LevelResponseSurrogate:
    """The kept mixed or per-level surrogate of one response, with the attributes ``fit.json`` reads.

    Parameters
    ----------
    levels : sequence of int
        Per column of the space: 0 for a continuous or stepped knob, the number of levels of a choice.
    names : sequence of str
        Parameter names, in column order.
    kernel : {"matern52", "sqexp", "matern32"}
    restarts, nugget, seed
        As for :class:`~doe.surrogate.mixed.MixedSurrogate`.
    widen : bool
        Widen the kept model's band (:mod:`doe.surrogate.levelbands`); False keeps the plug-in band.

    Attributes
    ----------
    model_ : MixedSurrogate or SeparateSurrogates
    kind_ : {"mixed", "separate"}
    candidates_ : list of dict
        Both surrogates' leave-one-out figures and which was kept.
    loo_ : LooResult
        Leave-one-out results; their standard deviations widened with the band.
    band_method_ : {"widened", "plugin"}
    band_words_ : str
        How the band was set, in one sentence.
    q2_low_ : float
        5 % quantile of posterior draws of the map's q2 (see :func:`doe.surrogate.hyperposterior.q2_draws`).
    length_scales_ : ndarray
        One per continuous column (fractions of its range); geometric mean over the level
        combinations for separate surrogates.
    names : list of str
        The continuous columns' names (those ``length_scales_`` belong to).
    spans_ : ndarray
        Their ranges, study units.
    statements_ : list of str
    """

    fidelity = "single"
    learn_noise_ = False

    def __init__(self, levels, names, kernel="matern52", restarts=4, nugget=1e-8, seed=0, widen=True):
        self.levels = [int(v) for v in levels]
        self.all_names = list(names)
        self.kernel = kernel if kernel in ("matern52", "sqexp", "matern32") else "matern52"
        self.restarts = restarts
        self.nugget = nugget
        self.seed = seed
        self.widen = widen

    # -- fitting -------------------------------------------------------------
    def fit(self, X_unit, y, spans=None) -> "LevelResponseSurrogate":
        """Fit both forms by :func:`best_level_surrogate` and keep the smaller leave-one-out error."""
        start = time.perf_counter()
        X, y = np.asarray(X_unit, dtype=float), np.asarray(y, dtype=float).ravel()
        self._set_data(X, y, spans)
        if self.constant_:
            self.model_, self.kind_, self.candidates_ = None, "constant", []
        else:
            self.model_, table = best_level_surrogate(self.levels, X, y, kernel=self.kernel,
                                                      restarts=int(self.restarts), nugget=float(self.nugget),
                                                      seed=int(self.seed))
            self.kind_ = "mixed" if isinstance(self.model_, MixedSurrogate) else "separate"
            if self.widen:
                self.model_.widen(level_unit_sample(self.levels, CHECK_POINTS, seed=int(self.seed) + 1),
                                  seed=int(self.seed))
            self.candidates_ = [{"kernel": f"{row['model']} ({self.kernel})", **{k: v for k, v in row.items()
                                                                                if k != "model"}}
                                for row in table]
        self.fit_seconds_ = time.perf_counter() - start
        self._adopt()
        return self

    def _set_data(self, X, y, spans) -> None:
        if X.ndim != 2 or X.shape[1] != len(self.levels) or len(y) != len(X):
            raise SurrogateError(f"runs must have shape (n, {len(self.levels)}) with one value each")
        self.X_unit_, self.y_ = X, y
        self.y_mean_, self.y_std_ = float(np.mean(y)), float(np.std(y)) or 1.0
        self.constant_ = float(np.std(y)) <= 1e-12 * max(1.0, abs(self.y_mean_))
        cont = [j for j, n in enumerate(self.levels) if n == 0]
        self.names = [self.all_names[j] for j in cont]
        self.spans_ = (np.ones(len(cont)) if spans is None else np.asarray(spans, dtype=float)[cont])
        self.groups_ = [np.array([i]) for i in range(len(y))]

    def _adopt(self) -> None:
        """Leave-one-out, length scales, statements and q2 draws of the kept model."""
        from .gp import LooResult

        cont = [j for j, n in enumerate(self.levels) if n == 0]
        if self.constant_:
            self.loo_ = LooResult(self.y_.copy(), self.y_.copy(), np.zeros(len(self.y_)), float("nan"), 0.0)
            self.length_scales_, self.statements_ = np.full(len(cont), 1e3), []
            self.band_words_ = "the response is constant"
            self.log_marginal_likelihood_, self.q2_low_ = float("nan"), float("nan")
            self.family_, self.trend_, self.noise_std_ = self.kernel, "constant", 0.0
            return
        m = self.model_
        self.loo_ = m.loo_
        self.family_, self.trend_ = self.kernel, "constant"
        self.noise_std_ = float(np.sqrt(self.nugget) * self.y_std_)
        if self.kind_ == "mixed":
            self.length_scales_ = np.broadcast_to(m.length_scales_, (len(cont),)).astype(float)
            self.log_marginal_likelihood_ = m.log_marginal_likelihood_
            notes = list(m.statements_)
            rho = {self.all_names[j]: r for j, r in zip([j for j, n in enumerate(self.levels) if n],
                                                        m.level_correlations_)}
            notes.append("one GP over all levels (its leave-one-out error was the smaller); correlation between "
                         "levels: " + ", ".join(f"{k} {v:.3f}" for k, v in rho.items()))
        else:
            scales = np.array([s.length_scales_ for s in m.models_.values()], dtype=float)
            self.length_scales_ = np.exp(np.mean(np.log(scales), axis=0))
            self.log_marginal_likelihood_ = float("nan")
            notes = [f"one GP per level combination ({len(m.models_)}; its leave-one-out error was the smaller); "
                     "the length scales are their geometric mean"]
        self.statements_ = [self._named(s) for s in notes]
        self.band_words_ = self._band_words()
        self.q2_low_ = self._q2_low()

    def _band_words(self) -> str:
        """How the kept model's band was set, in one sentence (``fit.json``'s uncertainty reason)."""
        m = self.model_
        bands = [m.band_] if self.kind_ == "mixed" else list(m.bands_.values())
        bands = [b for b in bands if b is not None]
        if not bands:
            return "plug-in: the fitted kernel settings"
        if self.kind_ == "mixed":
            return bands[0].words()
        return ("one GP per level combination, each band widened about its fitted mean by "
                + ", ".join(f"{b.factor:.2f}" for b in bands)
                + " (the larger of the spread over sampled kernel settings and the standardised leave-one-out "
                "errors)")

    @property
    def band_method_(self) -> str:
        """``"widened"`` when the kept model's band was widened, else ``"plugin"``."""
        if self.model_ is None:
            return "plugin"
        bands = [self.model_.band_] if self.kind_ == "mixed" else list(self.model_.bands_.values())
        return "widened" if any(b is not None for b in bands) else "plugin"

    def _named(self, text: str) -> str:
        """A mixed-GP statement with its column numbers replaced by the parameters' names."""
        return re.sub(r"(?:choice )?column (\d+)", lambda mt: self.all_names[int(mt.group(1))], text)

    def _q2_low(self, n_points: int = 256, n_paths: int = 128) -> float:
        U = level_unit_sample(self.levels, n_points, seed=int(self.seed))
        draws = self.sample_paths(U, n_paths, seed=int(self.seed))
        mean = self.predict(U)
        var = np.var(draws, axis=1)
        q2 = 1.0 - np.mean((draws - mean) ** 2, axis=1) / np.where(var > 0, var, np.inf)
        return float(np.quantile(q2, 0.05))

    # -- prediction ------------------------------------------------------------
    def predict(self, X_unit, return_std=False):
        """Mean (and standard deviation) at rows of ``Space.to_unit`` (choice columns as level indices)."""
        X = np.atleast_2d(np.asarray(X_unit, dtype=float))
        if self.constant_:
            mean = np.full(len(X), self.y_mean_)
            return (mean, np.zeros(len(X))) if return_std else mean
        return self.model_.predict(X, return_std=return_std)

    def sample_paths(self, X_unit, n_paths: int, seed=0, method: str = "auto") -> np.ndarray:
        """Joint posterior draws, shape ``(n_paths, n)``; per-level surrogates draw independently per combination."""
        X = np.atleast_2d(np.asarray(X_unit, dtype=float))
        if self.constant_:
            return np.full((int(n_paths), len(X)), self.y_mean_)
        if self.kind_ == "mixed":
            return self.model_.sample_paths(X, n_paths, seed)
        return self.model_.sample_paths(X, n_paths, seed, method)

    # -- records ---------------------------------------------------------------
    def to_arrays(self) -> dict:
        """Training data for the NPZ file."""
        return {"X": self.X_unit_, "y": self.y_}

    def to_dict(self) -> dict:
        """Plain JSON record (the runs go to the NPZ file): the kept model's own record and the options."""
        return {"surrogate": KIND, "levels": self.levels, "names": self.all_names, "kernel": self.kernel,
                "restarts": int(self.restarts), "nugget": float(self.nugget), "seed": int(self.seed),
                "widen": bool(self.widen),
                "kind": self.kind_, "model": None if self.model_ is None else self.model_.to_dict(),
                "candidates": self.candidates_, "fit_seconds": float(self.fit_seconds_),
                "spans": [float(s) for s in self.spans_]}

    @classmethod
    def from_dict(cls, record: dict, X_unit, y) -> "LevelResponseSurrogate":
        """Rebuild from :meth:`to_dict` and the runs, without optimising."""
        try:
            model = cls(record["levels"], record["names"], record["kernel"], record["restarts"], record["nugget"],
                        record["seed"], bool(record.get("widen", False)))
            kind, saved = str(record["kind"]), record["model"]
            candidates, seconds = list(record["candidates"]), float(record["fit_seconds"])
            spans = np.zeros(len(model.levels))
            spans[[j for j, n in enumerate(model.levels) if n == 0]] = record["spans"]
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            raise SurrogateError(f"the saved surrogate over choice knobs is incomplete or malformed ({exc!r})") from exc
        X, y = np.asarray(X_unit, dtype=float), np.asarray(y, dtype=float).ravel()
        model._set_data(X, y, spans)
        model.kind_, model.candidates_, model.fit_seconds_ = kind, candidates, seconds
        if kind == "mixed":
            model.model_ = MixedSurrogate.from_dict(saved, X, y)
        elif kind == "separate":
            model.model_ = SeparateSurrogates.from_dict(saved, X, y)
        elif kind == "constant" and model.constant_:
            model.model_ = None
        else:
            raise SurrogateError(f"the saved surrogate over choice knobs has an unknown kind {kind!r}")
        model._adopt()
        return model
