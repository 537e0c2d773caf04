"""Fitting a study's surrogates: one per response, from its results and the ``[fit]`` table.

The engine (:mod:`doe.surrogate`) takes arrays; this step reads what the
study says (settings, exact sources, the cheap runs of ``[low_fidelity]``)
and hands a :class:`~doe.surrogate.set.SurrogateSet` on.
"""
from __future__ import annotations

import numpy as np

from .. import defaults
from ..errors import SurrogateError
from ..surrogate.gp import ResponseSurrogate
from ..surrogate.set import SurrogateSet
from ..surrogate.twofidelity import TwoFidelitySurrogate

__all__ = ["fit_surrogates"]


def fit_surrogates(study, results, seed=0, low_results=None, **options) -> SurrogateSet:
    """Fit one surrogate per response of a study to its ok runs.

    Parameters
    ----------
    study : Study
        Supplies the space and the ``[fit]`` settings.
    results : ResultsTable
        Only ``status == "ok"`` rows are used.
    seed : int
        Seed of the optimiser restarts.
    low_results : ResultsTable, optional
        Cheap runs of the study's low-fidelity model (``[low_fidelity]``).
        With them (and ``fidelity`` not ``"single"``) each response gets a
        :class:`doe.surrogate.twofidelity.TwoFidelitySurrogate`: ``results`` are the
        expensive level.
    **options
        Override ``[fit]`` settings: ``kernel``, ``trend``, ``noise``,
        ``restarts``, ``nugget``, ``selection``, ``target_q2``,
        ``exact_sources``, ``length_scale_prior``, ``fidelity``.

    Returns
    -------
    SurrogateSet

    Raises
    ------
    SurrogateError
        No ok runs, a response that cannot be fitted, or ``fidelity = "two"``
        without cheap runs.

    Notes
    -----
    With ``noise = "auto"``, a noise level is learned for every response when
    any run comes from a source other than the study's exact sources
    (``[fit] exact_sources``, by default ``builtin`` and ``command``), and for
    a response whose replicated points disagree.
    """
    study.space.refuse_choices("fitting surrogates (doe fit)")
    settings = _settings(study, options)
    ok = results.ok
    if len(ok) == 0:
        raise SurrogateError(f"{results.path or 'results'}: no ok runs to fit")
    two = _two_fidelity(settings["fidelity"], low_results)
    X = study.space.to_unit(results.X())
    given = ok["source"] if "source" in ok.columns else ["recorded"] * len(ok)
    sources = sorted({str(s) for s in given} - set(settings["exact_sources"]))
    noise, reason = settings["noise"], ""
    if noise == "auto" and sources:
        noise, reason = "learn", f"runs from {', '.join(sources)} are treated as noisy: a noise level is learned"
    models, reasons = {}, {}
    names = study.space.names
    for k, resp in enumerate(study.responses):
        options = dict(kernel=settings["kernel"], trend=settings["trend"], noise=noise,
                       restarts=settings["restarts"], nugget=settings["nugget"], selection=settings["selection"],
                       seed=int(seed) + 1000 * k, names=names, length_scale_prior=settings["length_scale_prior"])
        try:
            if two:
                cheap = low_results.ok[np.isfinite(low_results.ok[resp.name].to_numpy(float))]
                model = TwoFidelitySurrogate(**options).fit(study.space.to_unit(cheap[names].to_numpy(float)),
                                                            cheap[resp.name].to_numpy(float),
                                                            X, results.y(resp.name))
            else:
                model = ResponseSurrogate(**options).fit(X, results.y(resp.name))
        except SurrogateError as exc:
            raise SurrogateError(f"response '{resp.name}': {exc}") from exc
        models[resp.name] = model
        reasons[resp.name] = reason
    return SurrogateSet(study.space, models, {r.name: r.unit for r in study.responses},
                        {r.name: r.goal for r in study.responses}, list(ok["run_id"]), settings["target_q2"],
                        study.name, reasons)


def _two_fidelity(fidelity: str, low_results) -> bool:
    """Whether to fit two fidelities (``[fit] fidelity``: auto, single or two)."""
    if fidelity not in ("auto", "single", "two"):
        raise SurrogateError(f"fidelity={fidelity!r} is not one of auto, single, two")
    if fidelity == "two" and (low_results is None or len(low_results.ok) == 0):
        raise SurrogateError("a two-fidelity fit needs cheap runs: add a [low_fidelity] table to the study "
                             "(or give them with --low-results)")
    return fidelity != "single" and low_results is not None and len(low_results.ok) > 0


def _settings(study, options) -> dict:
    fit = getattr(study, "fit", None)
    base = dict(defaults.FIT)
    if fit is not None:
        base.update({k: getattr(fit, k) for k in base})
    unknown = set(options) - set(base)
    if unknown:
        raise SurrogateError(f"unknown surrogate option(s) {sorted(unknown)}; known: {', '.join(base)}")
    base.update(options)
    return base
