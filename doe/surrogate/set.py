"""One surrogate per response of a study: predictions in the study's units, save and load.

Each response has a fitted :class:`~doe.surrogate.gp.ResponseSurrogate` (its
kernel choice, leave-one-out checks and plain statements) and, when the
kernel's settings are uncertain (``[fit] uncertainty``), a
:class:`~doe.surrogate.hyperposterior.HyperPosterior` of that kernel:
predictions, sample paths and verdicts then come from the mixture over its
draws. :meth:`SurrogateSet.predictor` returns whichever a response uses.

A :class:`SurrogateSet` is saved to a folder of ``model.json`` (hyperparameters,
the posterior's draws, scaling, the fit's words), ``data.npz`` (training data)
and ``fit.json`` (the accuracy report); loading reads JSON and NPZ
(``allow_pickle=False``) and refits with the stored hyperparameters, so
nothing in the folder is code.
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import DoeError, SurrogateError
from ..files import json_number, write_atomic, write_text
from ..seeds import child_seeds
from .diagnostics import response_report
from .gp import LooResult, ResponseSurrogate
from .hyperposterior import HyperPosterior, q2_draws
from .levelset import KIND as LEVELS_KIND, LevelResponseSurrogate
from .twofidelity import TwoFidelitySurrogate

__all__ = ["SurrogateSet", "load_surrogates", "prediction_frame", "uncertainty_record", "FORMAT", "Q2_QUANTILE"]

#: Lower quantile of the posterior draws of a map's q2 that must meet the target for ``ready``.
Q2_QUANTILE = 0.05

#: Name and version written in a saved surrogate folder.
FORMAT = ("doe-surrogate", 1)


@dataclass
class SurrogateSet:
    """One fitted :class:`ResponseSurrogate` per response of a study, in the study's units.

    Attributes
    ----------
    space : Space
    models : dict of str to ResponseSurrogate
    units : dict of str to str
        Unit of each response.
    goals : dict of str to str
    run_ids : list of str
        The runs the surrogates were fitted on, in row order.
    target_q2 : float
        The accuracy wanted (``[fit] target_q2``), for verdicts and the stopping rule.
    study_name : str
    noise_reason : dict of str to str
        Why a noise level was learned for a response (empty when it was not
        decided by the runs' sources).
    posteriors : dict of str to HyperPosterior
        What predicts each response that has one: the mixture over kernel
        settings, or that posterior's mode alone when the runs pin the
        settings down (``uncertainty[name]["method"]`` says which).
    uncertainty : dict of str to dict
        Per response (see :func:`uncertainty_record`): ``method`` ("mixture"
        or "plugin"), ``reason``, ``q2_low`` and ``q2_loo_plugin``. Empty for a
        set built by hand: every response is then plug-in.
    """

    space: object
    models: dict
    units: dict
    goals: dict
    run_ids: list
    target_q2: float = 0.9
    study_name: str = ""
    noise_reason: dict = field(default_factory=dict)
    posteriors: dict = field(default_factory=dict)
    uncertainty: dict = field(default_factory=dict)
    _loo: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def responses(self) -> list:
        """Response names, in study order."""
        return list(self.models)

    def unit_points(self, X) -> np.ndarray:
        """Points in the study's units scaled to the unit cube (a SurrogateError when they do not fit)."""
        try:
            return self.space.to_unit(X)
        except DoeError as exc:
            raise SurrogateError(str(exc)) from exc

    def predict(self, X) -> dict:
        """Mean and standard deviation of every response.

        Parameters
        ----------
        X : array_like, shape (n, d)
            Points in the STUDY'S UNITS, columns in ``space.names`` order.

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{response: (mean, std)}``, each of shape ``(n,)``, in the
            response's unit; ``std`` is the surrogate's own uncertainty.
        """
        U = self.unit_points(X)
        return {name: self.predictor(name).predict(U, return_std=True) for name in self.models}

    def predictor(self, name: str):
        """What predicts response ``name``: its mixture over kernel settings, else its fitted surrogate.

        Both take points in the unit cube: ``predict(U, return_std)`` and
        ``sample_paths(U, n_paths, seed, method)``.
        """
        return self.posteriors.get(name) or self.models[name]

    def method(self, name: str) -> str:
        """``"mixture"`` or ``"plugin"``: how response ``name`` treats its kernel's settings."""
        return self.uncertainty.get(name, {}).get("method", "mixture" if name in self.posteriors else "plugin")

    def loo(self, name: str) -> LooResult:
        """Leave-one-out results of response ``name`` from what predicts it (the mixture's are importance-weighted)."""
        if name not in self.posteriors:
            return self.models[name].loo_
        if name not in self._loo:
            r = self.posteriors[name].loo()
            self._loo[name] = LooResult(r["observed"], r["predicted"], r["std"], r["q2"], r["rmse"])
        return self._loo[name]

    def q2_low(self, name: str) -> float:
        """The :data:`Q2_QUANTILE` quantile of the posterior draws of the map's q2 (NaN when not known)."""
        return float(self.uncertainty.get(name, {}).get("q2_low", float("nan")))

    def sample_paths(self, X, n_paths: int, seed=0, method: str = "auto") -> dict:
        """Joint posterior draws per response at points in study units.

        Returns
        -------
        dict of str to ndarray, shape (n_paths, n)
            Response unit. Each response gets its own stream from ``seed``.
            Cost: see :meth:`ResponseSurrogate.sample_paths`.
        """
        U = self.unit_points(X)
        seeds = child_seeds(seed, len(self.models))
        return {name: self.predictor(name).sample_paths(U, n_paths, int(s), method)
                for name, s in zip(self.models, seeds)}

    def fit_report(self) -> dict:
        """The content of ``fit.json``: ``{response: {...}}`` (keys in :mod:`doe.surrogate.diagnostics`)."""
        return {name: response_report(m, self, name) for name, m in self.models.items()}

    def accuracy_met(self) -> bool:
        """Whether every response is ``ready`` by the numbers (the stopping rule; constant responses pass).

        Ready: ``q2_loo >= target_q2`` and, when known, the lower quantile of
        the posterior q2 draws too (:func:`doe.surrogate.diagnostics.verdict`).
        """
        return all(m.constant_ or self.meets_target(n) for n, m in self.models.items())

    def meets_target(self, name: str) -> bool:
        """``q2_loo`` of response ``name`` and (when known) its ``q2_low`` both at least ``target_q2``."""
        q2, low = self.loo(name).q2, self.q2_low(name)
        return bool(np.isfinite(q2) and q2 >= self.target_q2 and (np.isnan(low) or low >= self.target_q2))

    # -- save / load -------------------------------------------------------
    def save(self, folder) -> Path:
        """Write ``model.json`` (hyperparameters, scaling), ``data.npz`` (training data) and ``fit.json``.

        Nothing in the folder is code or a pickle: loading reads JSON and NPZ
        (``allow_pickle=False``) and refits with the stored hyperparameters.
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        meta = {"format": FORMAT[0], "version": FORMAT[1], "study": self.study_name,
                "parameters": [{"name": p.name, "unit": p.unit, "low": p.low, "high": p.high}
                               for p in self.space.parameters],
                "run_ids": list(self.run_ids), "target_q2": self.target_q2,
                "responses": {name: {"unit": self.units[name], "goal": self.goals[name],
                                     "noise_reason": self.noise_reason.get(name, ""), **m.to_dict(),
                                     **self._uncertainty_entry(name)}
                              for name, m in self.models.items()}}
        arrays = {}
        for i, m in enumerate(self.models.values()):
            arrays.update({f"{key}{i}": value for key, value in m.to_arrays().items()})
        write_text(folder / "model.json", json.dumps(meta, indent=1, allow_nan=False))
        write_atomic(folder / "data.npz", lambda tmp: _savez(tmp, arrays))
        write_text(folder / "fit.json", json.dumps(self.fit_report(), indent=2, allow_nan=False))
        return folder


    def _uncertainty_entry(self, name: str) -> dict:
        out = {}
        if name in self.uncertainty:
            u = self.uncertainty[name]
            out["uncertainty"] = {**u, "q2_low": json_number(u["q2_low"])}
        if name in self.posteriors:
            out["posterior"] = self.posteriors[name].to_record()
        return out


def uncertainty_record(model, posterior, reason: str, seed=0) -> dict:
    """How one response treats its kernel's settings, and how sure the runs make us of its accuracy.

    Parameters
    ----------
    model : ResponseSurrogate or TwoFidelitySurrogate
        Fitted.
    posterior : HyperPosterior or None
        What predicts the response, when not the fitted surrogate itself.
    reason : str
    seed : int
        Seed of the q2 draws.

    Returns
    -------
    dict
        ``method``, ``reason``, ``q2_low`` (the :data:`Q2_QUANTILE` quantile of
        :func:`~doe.surrogate.hyperposterior.q2_draws` of what predicts the
        response; NaN for a constant response) and ``q2_loo_plugin`` (the
        fitted surrogate's own ``q2_loo``).
    """
    used = posterior if posterior is not None else model
    low = float("nan")
    if not model.constant_:
        low = float(np.quantile(q2_draws(used, model.X_unit_.shape[1], seed=seed), Q2_QUANTILE))
    return {"method": posterior.method_ if posterior is not None else "plugin", "reason": reason,
            "q2_low": low, "q2_loo_plugin": float(model.loo_.q2)}


def _savez(path: Path, arrays: dict) -> None:
    with open(path, "wb") as f:       # a file object: numpy adds no ".npz" to the name
        np.savez(f, **arrays)


def load_surrogates(folder, study) -> SurrogateSet:
    """Load a surrogate folder written by :meth:`SurrogateSet.save`.

    Parameters
    ----------
    folder : str or Path
    study : Study
        Its parameters (names and bounds) must match those saved.

    Returns
    -------
    SurrogateSet
        Predictions are identical to those of the saved set.

    Raises
    ------
    SurrogateError
        Missing or malformed files, or a study that does not match.
    """
    folder = Path(folder)
    try:
        meta = json.loads((folder / "model.json").read_text())
        with np.load(folder / "data.npz", allow_pickle=False) as data:
            arrays = {k: data[k] for k in data.files}
    except (OSError, ValueError) as exc:
        raise SurrogateError(f"{folder}: cannot read the saved surrogate ({exc})") from exc
    if not isinstance(meta, dict) or meta.get("format") != FORMAT[0] or meta.get("version") != FORMAT[1]:
        raise SurrogateError(f"{folder}/model.json: not a '{FORMAT[0]}' version {FORMAT[1]} file")
    saved = [(p["name"], float(p["low"]), float(p["high"])) for p in meta["parameters"]]
    ours = [(p.name, p.low, p.high) for p in study.space.parameters]
    if saved != ours:
        raise SurrogateError(f"{folder}: saved for parameters {saved}, but the study has {ours}; refit with 'doe fit'")
    models, units, goals, reasons, posteriors, uncertainty = {}, {}, {}, {}, {}, {}
    for i, (name, rec) in enumerate(meta["responses"].items()):
        if f"X{i}" not in arrays or f"y{i}" not in arrays:
            raise SurrogateError(f"{folder}/data.npz: training data of '{name}' are missing")
        if rec.get("fidelity") == "two":
            mine = {k[:-len(str(i))]: v for k, v in arrays.items() if k.endswith(str(i)) and k[:-len(str(i))].isalpha()}
            models[name] = TwoFidelitySurrogate.from_dict(rec, mine, study.space.names)
        elif rec.get("surrogate") == LEVELS_KIND:
            models[name] = LevelResponseSurrogate.from_dict(rec, arrays[f"X{i}"], arrays[f"y{i}"])
        else:
            models[name] = ResponseSurrogate.from_dict(rec, arrays[f"X{i}"], arrays[f"y{i}"], study.space.names)
        units[name], goals[name], reasons[name] = rec["unit"], rec["goal"], rec.get("noise_reason", "")
        if "uncertainty" in rec:
            uncertainty[name] = _read_uncertainty(folder, name, rec["uncertainty"])
        if "posterior" in rec:
            posteriors[name] = HyperPosterior.from_record(rec["posterior"], models[name].X_unit_, models[name].y_)
    return SurrogateSet(study.space, models, units, goals, list(meta["run_ids"]), float(meta["target_q2"]),
                        str(meta["study"]), reasons, posteriors, uncertainty)


def _read_uncertainty(folder: Path, name: str, rec) -> dict:
    try:
        low = rec["q2_low"]
        return {"method": str(rec["method"]), "reason": str(rec["reason"]),
                "q2_low": float("nan") if low is None else float(low), "q2_loo_plugin": float(rec["q2_loo_plugin"])}
    except (KeyError, TypeError, ValueError) as exc:
        raise SurrogateError(f"{folder}/model.json: the uncertainty record of '{name}' is malformed ({exc!r})") from exc


def prediction_frame(sset: SurrogateSet, points):
    """Predictions as a table: ``run_id`` (if given), the parameters, ``<response>_mean``, ``<response>_std``.

    Parameters
    ----------
    sset : SurrogateSet
    points : DataFrame
        Parameter columns in study units, ``run_id`` optional.

    Returns
    -------
    DataFrame
        Means and standard deviations in each response's unit; the standard
        deviation is the surrogate's own uncertainty (no observation noise).
    """
    import pandas as pd

    names = sset.space.names
    out = pd.DataFrame(points[[c for c in ["run_id", *names] if c in points.columns]]).reset_index(drop=True)
    # choice columns hold level names (as in plan and results files): the surrogates take level indices
    X = np.column_stack([points[p.name].map(p.level_index).to_numpy(dtype=float)
                         if p.levels and not pd.api.types.is_numeric_dtype(points[p.name])
                         else points[p.name].to_numpy(dtype=float)
                         for p in sset.space.parameters])
    for name, (mean, std) in sset.predict(X).items():
        out[f"{name}_mean"] = mean
        out[f"{name}_std"] = std
    return out
