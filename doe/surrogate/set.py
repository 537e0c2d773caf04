"""One surrogate per response of a study: predictions in the study's units, save and load.

A :class:`SurrogateSet` is saved to a folder of ``model.json`` (hyperparameters,
scaling, the fit's words), ``data.npz`` (training data) and ``fit.json`` (the
accuracy report); loading reads JSON and NPZ (``allow_pickle=False``) and
refits with the stored hyperparameters, so nothing in the folder is code.
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import DoeError, SurrogateError
from ..files import write_atomic, write_text
from ..seeds import child_seeds
from .diagnostics import response_report
from .gp import ResponseSurrogate
from .twofidelity import TwoFidelitySurrogate

__all__ = ["SurrogateSet", "load_surrogates", "prediction_frame", "FORMAT"]

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
    """

    space: object
    models: dict
    units: dict
    goals: dict
    run_ids: list
    target_q2: float = 0.9
    study_name: str = ""
    noise_reason: dict = field(default_factory=dict)

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
        return {name: m.predict(U, return_std=True) for name, m in self.models.items()}

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
        return {name: m.sample_paths(U, n_paths, int(s), method) for (name, m), s in zip(self.models.items(), seeds)}

    def fit_report(self) -> dict:
        """The content of ``fit.json``: ``{response: {...}}`` (keys in :mod:`doe.surrogate.diagnostics`)."""
        return {name: response_report(m, self, name) for name, m in self.models.items()}

    def accuracy_met(self) -> bool:
        """Whether every response has ``q2_loo >= target_q2`` (the stopping rule; constant responses pass)."""
        return all(m.constant_ or m.loo_.q2 >= self.target_q2 for m in self.models.values())

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
                                     "noise_reason": self.noise_reason.get(name, ""), **m.to_dict()}
                              for name, m in self.models.items()}}
        arrays = {}
        for i, m in enumerate(self.models.values()):
            arrays.update({f"{key}{i}": value for key, value in m.to_arrays().items()})
        write_text(folder / "model.json", json.dumps(meta, indent=1, allow_nan=False))
        write_atomic(folder / "data.npz", lambda tmp: _savez(tmp, arrays))
        write_text(folder / "fit.json", json.dumps(self.fit_report(), indent=2, allow_nan=False))
        return folder


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
    models, units, goals, reasons = {}, {}, {}, {}
    for i, (name, rec) in enumerate(meta["responses"].items()):
        if f"X{i}" not in arrays or f"y{i}" not in arrays:
            raise SurrogateError(f"{folder}/data.npz: training data of '{name}' are missing")
        if rec.get("fidelity") == "two":
            mine = {k[:-len(str(i))]: v for k, v in arrays.items() if k.endswith(str(i)) and k[:-len(str(i))].isalpha()}
            models[name] = TwoFidelitySurrogate.from_dict(rec, mine, study.space.names)
        else:
            models[name] = ResponseSurrogate.from_dict(rec, arrays[f"X{i}"], arrays[f"y{i}"], study.space.names)
        units[name], goals[name], reasons[name] = rec["unit"], rec["goal"], rec.get("noise_reason", "")
    return SurrogateSet(study.space, models, units, goals, list(meta["run_ids"]), float(meta["target_q2"]),
                        str(meta["study"]), reasons)


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
    for name, (mean, std) in sset.predict(points[names].to_numpy(dtype=float)).items():
        out[f"{name}_mean"] = mean
        out[f"{name}_std"] = std
    return out
