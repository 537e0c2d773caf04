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
from ..surrogate.hyperposterior import HyperPosterior
from ..surrogate.kernels import kernel_label
from ..surrogate.set import SurrogateSet, uncertainty_record
from ..surrogate.twofidelity import TwoFidelitySurrogate

__all__ = ["fit_surrogates", "fit_uncertainty", "MIXTURE_KERNEL", "MIXTURE_STRUCTURE"]

#: Kernel family and trend of the hyperparameter posterior unless ``[fit] kernel`` / ``trend`` name one: with
#: the trend's variance sampled, "linear" covers a constant too. Measured on ten cases (Branin, Ishigami,
#: borehole, OTL circuit, wing weight, piston, G-function; 6 to 50 runs, one maximin plan each): 2-sigma bands
#: held 95.3 % of held-out errors on average (lowest 78 %) with Matern 5/2 and a linear trend, 93.1 % (lowest
#: 75 %) with the family and trend picked per response by leave-one-out error; mean held-out q2 0.818 and 0.805.
MIXTURE_KERNEL = ("matern52", "linear")
#: Structure of the posterior's kernel: ``"auto"`` compares one joint term with one joint term plus one-input
#: terms by evidence (:class:`~doe.surrogate.hyperposterior.HyperPosterior`). Measured on Ishigami from 100
#: maximin runs (seeds 0, 1, 4): largest Sobol index error 0.084-0.117 with the joint term alone, 0.004-0.012
#: with the terms the evidence chose (docs/intervals.md).
MIXTURE_STRUCTURE = "auto"


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
        ``exact_sources``, ``length_scale_prior``, ``fidelity``, ``uncertainty``.

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

    With ``uncertainty`` ``"auto"`` or ``"mixture"`` each response also gets a
    :class:`~doe.surrogate.hyperposterior.HyperPosterior` (kernel
    :data:`MIXTURE_KERNEL` unless ``kernel`` / ``trend`` fix one; the noise as
    decided above); predictions, sample
    paths and verdicts then use the mixture over its draws unless (``auto``)
    the runs pin the kernel's settings down. The reason is stated per response.
    """
    settings = _settings(study, options)
    if study.space.choices:
        from .choices import fit_level_surrogates       # the branch for choice knobs (no import cycle)
        return fit_level_surrogates(study, results, settings, seed)
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
    if settings["uncertainty"] not in ("auto", "mixture", "plugin"):
        raise SurrogateError(f"uncertainty={settings['uncertainty']!r} is not one of auto, mixture, plugin")
    if two and settings["uncertainty"] == "mixture":
        raise SurrogateError('uncertainty = "mixture" is not available for two-fidelity surrogates; use "auto" or '
                             '"plugin"')
    models, reasons, posteriors, uncertainty = {}, {}, {}, {}
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
            posterior, uncertainty[resp.name] = fit_uncertainty(model, settings["uncertainty"], int(seed) + 1000 * k)
        except SurrogateError as exc:
            raise SurrogateError(f"response '{resp.name}': {exc}") from exc
        if posterior is not None:
            posteriors[resp.name] = posterior
        models[resp.name] = model
        reasons[resp.name] = reason
    return SurrogateSet(study.space, models, {r.name: r.unit for r in study.responses},
                        {r.name: r.goal for r in study.responses}, list(ok["run_id"]), settings["target_q2"],
                        study.name, reasons, posteriors, uncertainty)


def fit_uncertainty(model, uncertainty: str = "auto", seed: int = 0) -> tuple:
    """The hyperparameter posterior of a fitted surrogate's kernel, when the mixture is wanted.

    Parameters
    ----------
    model : ResponseSurrogate or TwoFidelitySurrogate
        Fitted; its noise choice is kept, and its family and trend when the
        study fixes them (else :data:`MIXTURE_KERNEL`). The posterior's kernel
        has one-input terms beside its joint term when the evidence favours
        them (:data:`MIXTURE_STRUCTURE`).
    uncertainty : {"auto", "mixture", "plugin"}
        See :class:`~doe.study.settings.FitSettings`.
    seed : int

    Returns
    -------
    posterior : HyperPosterior or None
        The mixture, or (``auto``, when the runs pin the settings down, e.g.
        at least :data:`~doe.surrogate.hyperposterior.PLUGIN_RUNS_PER_PARAMETER`
        runs per parameter) its posterior mode alone, possibly with a widened
        band; None when the fitted surrogate itself predicts (``plugin``, two
        fidelities, a constant response).
    record : dict
        ``method`` ("mixture" or "plugin"), ``reason`` (one sentence),
        ``q2_low`` (5 % quantile of the posterior draws of the map's q2) and
        ``q2_loo_plugin`` (see :func:`doe.surrogate.set.uncertainty_record`).
    """
    posterior, reason = None, ""
    if getattr(model, "fidelity", "single") == "two":
        reason = "two-fidelity surrogates use their fitted kernel settings (plug-in)"
    elif model.constant_:
        reason = "the response is constant"
    elif uncertainty == "plugin":
        reason = 'the plug-in fit was asked for ([fit] uncertainty = "plugin")'
    else:
        hp = HyperPosterior(family=MIXTURE_KERNEL[0] if model.kernel == "auto" else model.kernel,
                            trend=MIXTURE_KERNEL[1] if model.trend == "auto" else model.trend,
                            noise="learn" if model.learn_noise_ else "fixed", mode=uncertainty,
                            structure=MIXTURE_STRUCTURE, seed=seed).fit(model.X_unit_, model.y_)
        posterior, reason = hp, f"{hp.reason_} (posterior of a {kernel_label(hp.family_, hp.trend)} kernel)"
    return posterior, uncertainty_record(model, posterior, reason, seed)


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
