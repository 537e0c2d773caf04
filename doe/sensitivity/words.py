"""Presenting Sobol indices: the sensitivity JSON and a ranked statement in plain words.

Sensitivity JSON
----------------
One object per response, one entry per parameter (the documented interface)::

    {"<response>": {"<parameter>": {"S1": x, "S1_pm95": x, "ST": x, "ST_pm95": x, ...}, ...},
     ...,
     "_meta": {...}}

Per parameter (all indices are shares of the response's variance, 0..1;
``_pm95`` keys, "plus or minus at 95 %", are half-widths of 95 % intervals):

==========================  ===================================================
``S1``, ``ST``              first-order and total index
``S1_pm95``, ``ST_pm95``    combined half-width (estimator and surrogate)
``S1_pm95_mc``,             half-width from the Monte-Carlo estimator alone
``ST_pm95_mc``
``S1_pm95_surrogate``,      half-width from the surrogate's uncertainty alone
``ST_pm95_surrogate``       (0 in the direct route)
``rank``                    1 = largest total index; null for a fixed parameter
``fixed``                   true when the input distribution holds it constant
==========================  ===================================================

``_meta``: ``route`` ("surrogate" or "direct"), ``method``, ``library`` (credit),
``confidence_level`` (0.95), ``inputs`` (distribution kind and, per parameter,
bounds or mean and sd in its unit), ``base_samples``, ``evaluations``,
``target_pm95`` (the half-width the estimator aimed for), ``target_reached``, ``path_base_samples``, ``n_paths``,
``second_order``, ``seed``, ``dropped_base_rows`` (base rows left out because
the model failed at one of their points), and ``responses``: per response its ``unit``,
``mean`` and ``std`` under the input distribution (response unit),
``ranking`` (parameters by total index), ``unresolved`` (pairs whose order the
data do not settle), ``too_few_runs`` (surrogate route: the intervals of the
two largest total indices overlap, so the runs cannot rank the knobs), ``notes``, ``statement`` (plain words) and, with second
order, ``second_order``: a list of ``{"parameters": [a, b], "S2": x,
"S2_pm95": x}``.
"""
from __future__ import annotations

import numpy as np

from ..errors import SensitivityError
from .sobol import NEGLIGIBLE, ResponseIndices, SobolResult

__all__ = ["to_dict", "describe", "statements", "SMALL", "META_KEY"]

#: Key of the metadata object in the sensitivity JSON.
META_KEY = "_meta"
#: Credit for the library behind the estimates, written in ``_meta`` (its interval keys are renamed to ours).
LIBRARY = ("SALib (Herman and Usher 2017, Journal of Open Source Software 2(9), 97): samples and estimators; "
           "its *_conf interval results are written here as *_pm95")
#: Total index under which an effect is called small (common practice, no source).
SMALL = 0.05
#: Interaction share (ST - S1) worth a mention (common practice, no source).
_INTERACTION = 0.05


def _pct(x: float) -> int:
    return int(round(100 * min(max(float(x), 0.0), 1.0)))


def _range(lo: float, hi: float) -> str:
    return f"{_pct(lo)}-{_pct(hi)} %"


def _partner(res: ResponseIndices, i: int, labels: dict) -> str:
    """The parameter sharing the largest second-order index with ``i``, if it carries most of the interaction."""
    if res.S2 is None:
        return ""
    s2 = np.fmax(np.nan_to_num(res.S2[i, :], nan=-1.0), np.nan_to_num(res.S2[:, i], nan=-1.0))
    j = int(np.argmax(s2))
    if s2[j] > 0.5 * (res.ST[i] - res.S1[i]):
        return f" with {labels.get(res.parameters[j], res.parameters[j])}"
    return ""


def _effect(res: ResponseIndices, i: int, first: bool, what: str, labels: dict) -> str:
    name = labels.get(res.parameters[i], res.parameters[i])
    s1, c1 = res.S1[i], res.S1_pm95[i]
    head = (f"{name} explains about {_pct(s1)} % of the variation in {what} on its own" if first
            else f"{name} about {_pct(s1)} %")
    text = f"{head} (95 % interval {_range(s1 - c1, s1 + c1)})"
    inter = res.ST[i] - res.S1[i]
    total = f"total effect {_pct(res.ST[i])} %, {_range(res.ST[i] - res.ST_pm95[i], res.ST[i] + res.ST_pm95[i])}"
    if inter > max(_INTERACTION, s1):
        return f"{text}, mostly through interaction{_partner(res, i, labels)} ({total})"
    if inter > _INTERACTION:
        return f"{text}, and more through interactions ({total})"
    return text


def describe(res: ResponseIndices, what: str | None = None, labels: dict | None = None, unit: str = "") -> str:
    """A ranked statement in plain words for one response.

    Parameters
    ----------
    res : ResponseIndices
    what : str, optional
        How to call the response ("net downforce"); its name by default.
    labels : dict of str to str, optional
        Words for parameters ("wing angle of attack"); names by default.
    unit : str
        Response unit, to state its spread.

    Returns
    -------
    str
        E.g. "wing_aoa explains about 61 % of the variation in cla on its own
        (95 % interval 55-67 %); flap_angle about 25 % (...), mostly through
        interaction with wing_height (total effect 41 %, 35-47 %);
        section_camber is negligible (total effect below 1 %)."
    """
    labels = labels or {}
    what = what or res.response
    if res.std == 0.0:
        return f"{what} does not vary under this input distribution."
    shown = lambda i: labels.get(res.parameters[i], res.parameters[i])  # noqa: E731 - a one-line helper
    high = res.ST + res.ST_pm95
    main, small, negligible = [], [], []
    for name in res.ranking():
        i = res.index_of(name)
        if high[i] < NEGLIGIBLE:
            negligible.append(shown(i))
        elif high[i] < SMALL:
            small.append(f"{shown(i)} (total at most {max(_pct(high[i]), 1)} %)")
        else:
            main.append(_effect(res, i, not main, what, labels))
    parts = main or [f"no parameter has more than a small effect on {what}"]
    if small:
        parts.append(f"small effects: {_join(small)}")
    if negligible:
        verb = "is" if len(negligible) == 1 else "are"
        parts.append(f"{_join(negligible)} {verb} negligible (total effect below {_pct(NEGLIGIBLE)} %)")
    text = "; ".join(parts) + "."
    text = text[0].upper() + text[1:] if not main else text
    fixed = [shown(i) for i in range(len(res.parameters)) if res.fixed[i]]
    if fixed:
        text += f" Held fixed: {_join(fixed)}."
    if res.too_few_runs:
        top = sorted((i for i in range(len(res.parameters)) if not res.fixed[i]), key=lambda i: -res.ST[i])[:2]
        shown_top = [f"{shown(i)} ({_pct(res.ST[i] - res.ST_pm95[i])}-{_pct(res.ST[i] + res.ST_pm95[i])} %)"
                     for i in top]
        text += (f" Too few runs to rank the knobs of {what}: the total effects of {_join(shown_top)} overlap; "
                 "add runs before choosing between them.")
    if res.unresolved:
        pairs = [f"{labels.get(a, a)} and {labels.get(b, b)}" for a, b in res.unresolved[:4]]
        more = f" (and {len(res.unresolved) - 4} more pairs)" if len(res.unresolved) > 4 else ""
        text += f" The data do not settle the order of {_join(pairs, sep='; ')}{more}."
    if unit:
        text += f" Its standard deviation over the inputs is {res.std:.3g} {unit}."
    if res.notes:
        text += " Caution: " + "; ".join(res.notes) + "."
    return text


def _join(items: list, sep: str = ", ") -> str:
    if len(items) <= 1:
        return "".join(items)
    return sep.join(items[:-1]) + (" and " if sep == ", " else "; and ") + items[-1]


def statements(result: SobolResult, labels: dict | None = None, whats: dict | None = None,
               units: dict | None = None) -> dict:
    """Plain-words statement per response (see :func:`describe`)."""
    whats, units = whats or {}, units or {}
    return {r: describe(res, whats.get(r), labels, units.get(r, "")) for r, res in result.responses.items()}


# ---------------------------------------------------------------------------
def _entry(res: ResponseIndices, i: int, rank: dict) -> dict:
    keys = ("S1", "S1_pm95", "ST", "ST_pm95", "S1_pm95_mc", "ST_pm95_mc", "S1_pm95_surrogate", "ST_pm95_surrogate")
    out = {k: float(getattr(res, k)[i]) for k in keys}
    out["rank"] = rank.get(res.parameters[i])
    out["fixed"] = bool(res.fixed[i])
    return out


def _second_order(res: ResponseIndices) -> list:
    d = len(res.parameters)
    return [{"parameters": [res.parameters[i], res.parameters[j]], "S2": float(res.S2[i, j]),
             "S2_pm95": float(res.S2_pm95[i, j])}
            for i in range(d) for j in range(i + 1, d) if np.isfinite(res.S2[i, j])]


def to_dict(result: SobolResult, labels: dict | None = None, whats: dict | None = None,
            units: dict | None = None) -> dict:
    """The sensitivity JSON (keys in the module docstring).

    Parameters
    ----------
    result : SobolResult
    labels, whats, units : dict, optional
        Words for parameters and responses and response units, for the statements.

    Raises
    ------
    SensitivityError
        When a response is called ``_meta``.
    """
    if META_KEY in result.responses:
        raise SensitivityError(f"a response called '{META_KEY}' clashes with the sensitivity JSON's metadata key")
    words = statements(result, labels, whats, units)
    out, meta_resp = {}, {}
    for r, res in result.responses.items():
        ranking = res.ranking()
        rank = {name: k + 1 for k, name in enumerate(ranking)}
        out[r] = {p: _entry(res, i, rank) for i, p in enumerate(res.parameters)}
        meta_resp[r] = {"unit": (units or {}).get(r, ""), "mean": res.mean, "std": res.std, "ranking": ranking,
                        "unresolved": [list(p) for p in res.unresolved], "notes": list(res.notes),
                        "too_few_runs": bool(res.too_few_runs),
                        "statement": words[r]}
        if res.S2 is not None:
            meta_resp[r]["second_order"] = _second_order(res)
    out[META_KEY] = {
        "route": result.route,
        "method": ("Saltelli sampling on scrambled Sobol' points; S1 Saltelli et al. 2010, ST Jansen 1999"
                   + (", S2 Saltelli 2002" if result.second_order else "") + " (SALib); 95 % intervals from the "
                   "bootstrap" + (" and GP posterior sample paths (Le Gratiet et al. 2014), centred on the mean "
                                  "index over the paths (Marrel et al. 2009)" if result.route == "surrogate" else "")),
        "library": LIBRARY,
        "confidence_level": 0.95, "inputs": result.inputs.describe(), "base_samples": result.base_samples,
        "evaluations": result.evaluations, "target_pm95": result.target_conf, "target_reached": result.reached,
        "path_base_samples": result.path_base_samples, "n_paths": result.n_paths,
        "second_order": result.second_order, "seed": result.seed, "dropped_base_rows": result.dropped_rows,
        "responses": meta_resp,
    }
    return out
