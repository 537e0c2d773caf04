"""Defaults in one place: the ``[fit]`` table's, the surrogates' and the workflow's.

The study reader (:class:`doe.study.settings.FitSettings`), the surrogate
estimators (:class:`doe.surrogate.gp.ResponseSurrogate`,
:class:`doe.surrogate.twofidelity.TwoFidelitySurrogate`) and the workflow
all take their defaults from here, so a default is changed once.
"""
from __future__ import annotations

__all__ = ["FIT", "KERNEL", "TREND", "NOISE", "RESTARTS", "NUGGET", "SELECTION", "TARGET_Q2", "EXACT_SOURCES",
           "LENGTH_SCALE_PRIOR", "FIDELITY", "UNCERTAINTY", "NEXT_RUNS"]

#: Kernel family (``auto``: one per response, chosen by leave-one-out error).
KERNEL = "auto"
#: Trend of the Gaussian process (``auto``: constant or linear, chosen like the kernel).
TREND = "auto"
#: Noise handling (``auto``: learned for noisy sources or disagreeing replicates, else a fixed nugget).
NOISE = "auto"
#: Extra optimiser starts per kernel.
RESTARTS = 3
#: Fixed nugget of a deterministic evaluator, relative to the response's variance.
NUGGET = 1e-6
#: Kernel choice by leave-one-out error (``loo``) or marginal likelihood.
SELECTION = "loo"
#: Accuracy wanted: leave-one-out q2 of every response at least this (the stopping rule of ``doe next``).
TARGET_Q2 = 0.9
#: ``source`` values of the results that come from a deterministic evaluator.
EXACT_SOURCES = ("builtin", "command")
#: Standard deviation (natural log) of the log-normal prior on length scales; 0: maximum likelihood.
LENGTH_SCALE_PRIOR = 1.5
#: ``auto``: two fidelities when the study has a ``[low_fidelity]`` table.
FIDELITY = "auto"
#: Hyperparameter uncertainty: ``mixture`` (predictions average over sampled kernel settings), ``plugin``
#: (the fitted settings alone) or ``auto`` (the mixture unless the runs pin the settings down).
UNCERTAINTY = "auto"

#: The ``[fit]`` defaults by key.
FIT = {"kernel": KERNEL, "trend": TREND, "noise": NOISE, "restarts": RESTARTS, "nugget": NUGGET,
       "selection": SELECTION, "target_q2": TARGET_Q2, "exact_sources": EXACT_SOURCES,
       "length_scale_prior": LENGTH_SCALE_PRIOR, "fidelity": FIDELITY,
       "uncertainty": UNCERTAINTY}

#: Runs proposed by ``doe run`` and ``doe report`` when not told otherwise.
NEXT_RUNS = 4
