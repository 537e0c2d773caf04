"""Gaussian-process surrogates: leave-one-out identity, accuracy on published test functions,
noise, duplicates, diagnostics, sample paths, save/load."""
import json
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor

from doe.testing import functions as tf
from doe.errors import NotFittedError, StudyError, SurrogateError
from doe.design.plans import maximin_lhs
from doe.runs.results import ResultsTable
from doe.study.reader import read_study_text
from doe.surrogate.diagnostics import verdict
from doe.surrogate.gp import LooResult, ResponseSurrogate
from doe.surrogate.set import load_surrogates
from doe.workflow.fit import fit_surrogates

from conftest import study_text

FAST = dict(kernel="sqexp", trend="constant", restarts=2)  # one kernel: tests of other things stay fast


def _data(name, n, seed=1):
    f = tf.get(name)
    U = maximin_lhs(n, f.dim, seed=seed)
    return f, U, f.on_unit(U)


def _explicit_loo(model):
    """Leave each point out and refit with the hyperparameters fixed (no optimiser)."""
    Z, yn = model.Z_, model.yn_
    pred, var = np.empty(len(yn)), np.empty(len(yn))
    for i in range(len(yn)):
        keep = np.arange(len(yn)) != i
        gp = GaussianProcessRegressor(model.gp_.kernel_, alpha=model.nugget_, optimizer=None, normalize_y=False)
        gp.fit(Z[keep], yn[keep])
        mu, sd = gp.predict(Z[i:i + 1], return_std=True)
        pred[i], var[i] = mu[0], sd[0] ** 2 + model.nugget_  # sklearn's std includes the white noise, not alpha
    return model.y_mean_ + model.y_std_ * pred, np.sqrt(var) * model.y_std_


@pytest.mark.parametrize("name,n,noise", [("branin", 20, "fixed"), ("hartmann3", 30, "fixed"),
                                          ("borehole", 40, "fixed"), ("branin", 20, "learn")])
def test_closed_form_loo_equals_explicit_refits(name, n, noise):
    # Rasmussen & Williams 2006, sec. 5.4.2, eqs. 5.10-5.12; Dubrule 1983: closed-form LOO residuals equal
    # explicit refits with fixed hyperparameters. Functions: Surjanovic & Bingham (VLSE).
    f, U, y = _data(name, n)
    if noise == "learn":
        y = y + 3.0 * np.random.default_rng(0).standard_normal(len(y))
    m = ResponseSurrogate(noise=noise, seed=0, **FAST).fit(U, y)
    pred, std = _explicit_loo(m)
    # 1e-6 relative: both are exact linear algebra on the same matrices; the difference is round-off
    # amplified by the condition number of K (up to ~1/nugget = 1e6)
    scale = np.std(y)
    np.testing.assert_allclose(m.loo_.predicted, pred, rtol=0, atol=1e-6 * scale)
    np.testing.assert_allclose(m.loo_.std, std, rtol=1e-5)
    q2_explicit = 1 - np.sum((y - pred) ** 2) / np.sum((y - y.mean()) ** 2)
    assert m.loo_.q2 == pytest.approx(q2_explicit, abs=1e-8)


@pytest.mark.parametrize("name,threshold", [("branin", 0.95), ("hartmann3", 0.90), ("borehole", 0.99)])
def test_accuracy_with_ten_runs_per_parameter(name, threshold):
    # Loeppky, Sacks & Welch 2009: n = 10 d runs is the usual first plan for a GP surrogate.
    # Our stated accuracy on an independent test set of 2000 uniform points (thresholds are our claim,
    # set below the values measured with seed 1: branin 0.984, hartmann3 0.951, borehole 0.9999).
    f, U, y = _data(name, 10 * f_dim(name))
    m = ResponseSurrogate(seed=0).fit(U, y)   # full automatic kernel choice
    Ut = np.random.default_rng(123).random((2000, f.dim))
    yt = f.on_unit(Ut)
    q2_test = 1 - np.mean((m.predict(Ut) - yt) ** 2) / np.var(yt)
    assert q2_test >= threshold
    # the LOO estimate is honest: not more optimistic than the test set by more than 0.05
    # (LOO usually under-states accuracy, since each prediction uses one run fewer; common practice, no source)
    assert m.loo_.q2 <= q2_test + 0.05


def f_dim(name):
    return tf.get(name).dim


def test_learned_noise_close_to_truth_and_not_interpolated():
    # Replicated points with known Gaussian noise (sd 5) on Branin (Surjanovic & Bingham): the learned
    # noise sd must lie within a factor 1.5 of the truth. With 20 replicate pairs the sample sd of the
    # noise has a relative standard error of about 1/sqrt(2*20) = 16 %, so 1.5 is about 2.5 standard errors.
    f, U, _ = _data("branin", 20)
    U = np.vstack([U, U])
    sigma = 5.0
    y = f.on_unit(U) + sigma * np.random.default_rng(4).standard_normal(len(U))
    m = ResponseSurrogate(seed=0, **FAST).fit(U, y)
    assert m.learn_noise_
    assert sigma / 1.5 <= m.noise_std_ <= sigma * 1.5
    # not interpolating: at each replicated point the prediction sits between its two noisy values
    mu = m.predict(U[:20])
    lo, hi = np.minimum(y[:20], y[20:]), np.maximum(y[:20], y[20:])
    assert np.mean((mu >= lo - 1.0) & (mu <= hi + 1.0)) >= 0.9   # 1.0 = 0.2 sigma of slack for smoothing
    # and, without replicates, the residuals at the runs stay of the order of the noise
    y1 = f.on_unit(U[:20]) + sigma * np.random.default_rng(5).standard_normal(20)
    m1 = ResponseSurrogate(seed=0, noise="learn", **FAST).fit(U[:20], y1)
    assert np.sqrt(np.mean((m1.predict(U[:20]) - y1) ** 2)) > 0.3 * sigma


def test_duplicates_of_a_deterministic_evaluator_are_merged():
    f, U, y = _data("branin", 15)
    U2, y2 = np.vstack([U, U[:5]]), np.concatenate([y, y[:5]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")           # no warning may escape to the terminal
        m = ResponseSurrogate(seed=0, **FAST).fit(U2, y2)
    assert not m.learn_noise_ and len(m.y_) == 15
    assert sorted(len(g) for g in m.groups_)[-5:] == [2] * 5
    ref = ResponseSurrogate(seed=0, **FAST).fit(U, y)
    np.testing.assert_allclose(m.predict(U), ref.predict(U), rtol=1e-9)  # same data once merged


def test_irrelevant_parameter_is_stated():
    # Branin (Surjanovic & Bingham) with a third input it does not depend on
    U = maximin_lhs(30, 3, seed=2)
    y = tf.get("branin").on_unit(U[:, :2])
    m = ResponseSurrogate(seed=0, names=["x1", "x2", "dummy"], **FAST).fit(U, y)
    assert m.length_scales_[2] > 20 * max(m.length_scales_[:2])
    assert any(s.startswith("dummy: length scale at its upper bound") for s in m.statements_)


def test_kernel_choice_prefers_rough_kernel_for_rough_function():
    # |x - 0.3| has a kink: a once-differentiable Matern 3/2 should beat the infinitely smooth
    # squared-exponential on leave-one-out error (Rasmussen & Williams 2006, sec. 4.2.1)
    U = np.linspace(0, 1, 25)[:, None]
    y = np.abs(U[:, 0] - 0.3)
    m = ResponseSurrogate(seed=0, trend="constant").fit(U, y)
    assert m.family_ in ("matern32", "matern52")
    assert len(m.candidates_) == 3 and sum(c["chosen"] for c in m.candidates_) == 1


def test_sample_paths_match_posterior():
    f, U, y = _data("hartmann3", 20)
    m = ResponseSurrogate(seed=0, **FAST).fit(U, y)
    Xq = np.random.default_rng(3).random((40, 3))
    mean, std = m.predict(Xq, return_std=True)
    cov = m.predict_cov(Xq)
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), std, rtol=1e-6)   # the same formula two ways
    P = m.sample_paths(Xq, 4000, seed=1, method="exact")
    # 4000 draws: the standard error of a sample mean is std/63; allow 5 standard errors
    assert np.all(np.abs(P.mean(0) - mean) <= 5 * std / np.sqrt(4000) + 1e-9)
    np.testing.assert_allclose(P.std(0), std, rtol=0.1)              # sd of a sample sd ~ 1/sqrt(2*4000)
    F = m.sample_paths(Xq, 2000, seed=1, method="features")
    # random-feature prior (2048 features) then exact conditioning: mean and sd within 15 % of the
    # exact posterior sd (Monte Carlo error ~2-3 % plus the feature approximation)
    assert np.all(np.abs(F.mean(0) - mean) <= 0.15 * std + 1e-9)
    np.testing.assert_allclose(F.std(0), std, rtol=0.15)
    assert np.array_equal(m.sample_paths(Xq, 3, seed=7), m.sample_paths(Xq, 3, seed=7))  # same seed, same draws


def test_errors_are_ours():
    with pytest.raises(NotFittedError):
        ResponseSurrogate().predict(np.zeros((1, 2)))
    with pytest.raises(SurrogateError, match="kernel"):
        ResponseSurrogate(kernel="gaussian").fit(np.random.rand(5, 2), np.random.rand(5))
    with pytest.raises(SurrogateError, match="distinct"):
        ResponseSurrogate().fit(np.zeros((4, 2)), np.ones(4))
    with pytest.raises(SurrogateError, match="NaN"):
        ResponseSurrogate().fit(np.random.rand(5, 2), np.array([1, 2, np.nan, 4, 5.0]))


# ---------------------------------------------------------------------------
STUDY = study_text("branin-demo", [("x1", "-", -5.0, 10.0), ("x2", "-", 0.0, 15.0)],
                   [("f", "-", "minimize"), ("g", "N")], description="Branin function dressed as a study (invented data)")


def branin_results(study, n=20, seed=3, source="builtin", noise=0.0):
    f = tf.get("branin")
    U = maximin_lhs(n, 2, seed=seed)
    X = f.from_unit(U)
    fr = pd.DataFrame(X, columns=["x1", "x2"])
    fr.insert(0, "run_id", [f"r{i:03d}" for i in range(1, n + 1)])
    rng = np.random.default_rng(seed)
    fr["f"] = f(X) + noise * rng.standard_normal(n)
    fr["g"] = 2.0 * X[:, 0] + 0.05 * X[:, 1] ** 2
    fr["status"] = "ok"
    fr["source"] = source
    return ResultsTable(fr, ["x1", "x2"], ["f", "g"])


def test_fit_set_report_and_round_trip(tmp_path):
    study = read_study_text(STUDY + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 2\n")
    res = branin_results(study)
    sset = fit_surrogates(study, res, seed=0)
    rep = sset.fit_report()
    assert set(rep) == {"f", "g"}
    for key in ("q2_loo", "rmse_loo", "verdict", "standardised_residuals", "noise", "length_scales"):
        assert key in rep["f"]
    # 20 maximin runs of Branin: the plug-in fit reaches q2_loo 0.934 (measured), but its kernel's settings are
    # uncertain (the short-chain check widens the band by more than 10 %), so the mixture predicts; its importance-weighted
    # leave-one-out q2 is 0.81 (measured): "add runs", by the rule in doe.surrogate.diagnostics.verdict
    assert rep["f"]["noise"] == "fixed" and rep["f"]["uncertainty"] == "mixture" and "uncertain" in rep["f"]["uncertainty_reason"]
    assert rep["f"]["q2_loo_plugin"] == pytest.approx(0.934, abs=0.005) and rep["f"]["verdict"] == "add runs"
    assert rep["f"]["verdict"] == verdict(sset.loo("f"), 0.0, sset.target_q2, q2_low=sset.q2_low("f"))[0]
    # the straight-line-like g pins its settings down: the posterior mode alone predicts, and it is ready
    assert rep["g"]["uncertainty"] == "plugin" and rep["g"]["verdict"] == "ready"
    assert set(rep["f"]["standardised_residuals"]) == set(res.frame["run_id"])
    json.dumps(rep, allow_nan=False)
    folder = sset.save(tmp_path / "surrogate")
    assert json.loads((folder / "fit.json").read_text())["g"]["unit"] == "N"
    again = load_surrogates(folder, study)
    Xq = np.random.default_rng(0).random((300, 2)) * [15, 15] + [-5, 0]
    a, b = sset.predict(Xq), again.predict(Xq)
    for name in ("f", "g"):
        assert np.array_equal(a[name][0], b[name][0]) and np.array_equal(a[name][1], b[name][1])
    assert np.array_equal(sset.sample_paths(Xq[:50], 3, seed=2)["f"], again.sample_paths(Xq[:50], 3, seed=2)["f"])
    assert again.fit_report()["f"]["q2_loo"] == rep["f"]["q2_loo"]
    other = read_study_text(STUDY.replace("high = 15.0", "high = 16.0"))
    with pytest.raises(SurrogateError, match="parameters"):
        load_surrogates(folder, other)


def test_ready_needs_the_lower_q2_quantile_too():
    # the verdict rule (doe.surrogate.diagnostics): q2_loo AND the 5 % quantile of the posterior q2 draws must meet
    # the target; without the quantile (NaN) q2_loo alone decides, as before
    obs = np.linspace(0.0, 1.0, 12)
    loo = LooResult(obs, obs + 0.01 * np.sin(7 * obs), np.full(12, 0.02), 0.995, 0.007)
    assert verdict(loo, 0.0, 0.9)[0] == "ready"
    assert verdict(loo, 0.0, 0.9, q2_low=0.95)[0] == "ready"
    label, why = verdict(loo, 0.0, 0.9, q2_low=0.85)
    assert label == "add runs" and "lucky" in why and "0.850" in why


def test_noise_follows_the_source_column():
    study = read_study_text(STUDY + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 1\n")
    sset = fit_surrogates(study, branin_results(study, source="cfd", noise=2.0), seed=0)
    rep = sset.fit_report()["f"]
    assert rep["noise"] == "learned" and "cfd" in rep["noise_reason"]


def test_fit_table_is_checked():
    s = read_study_text(STUDY + "\n[fit]\ntarget_q2 = 0.95\nnoise = \"learn\"\n")
    assert s.fit.target_q2 == 0.95 and s.fit.noise == "learn"
    with pytest.raises(StudyError, match="restart"):
        read_study_text(STUDY + "\n[fit]\nrestart = 3\n")
    with pytest.raises(StudyError, match="kernel"):
        read_study_text(STUDY + "\n[fit]\nkernel = \"rbf\"\n")
    assert read_study_text(STUDY).fit.uncertainty == "auto"
    assert read_study_text(STUDY + "\n[fit]\nuncertainty = \"plugin\"\n").fit.uncertainty == "plugin"
    with pytest.raises(StudyError, match="uncertainty") as err:
        read_study_text(STUDY + "\n[fit]\nuncertainty = \"bayes\"\n")
    assert "\n" not in str(err.value) and "mixture" in str(err.value)


def test_plugin_uncertainty_keeps_the_fitted_surrogate():
    study = read_study_text(STUDY + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 1\nuncertainty = \"plugin\"\n")
    sset = fit_surrogates(study, branin_results(study), seed=0)
    assert sset.posteriors == {} and sset.predictor("f") is sset.models["f"]
    rep = sset.fit_report()["f"]
    assert rep["uncertainty"] == "plugin" and "asked for" in rep["uncertainty_reason"]
    assert rep["q2_loo"] == rep["q2_loo_plugin"] and 0 < rep["q2_low"] <= 1


@pytest.mark.parametrize("name", ["branin", "hartmann3"])
def test_a_corrupted_run_is_flagged(name):
    # one value shifted by 3 standard deviations of the response (a unit slip); functions from
    # Surjanovic & Bingham (VLSE). The clean data must not be flagged (verdict rules in doe.surrogate.diagnostics).

    f, U, y = _data(name, 30, seed=2)
    bad = y.copy()
    bad[7] += 3 * np.std(y)
    m = ResponseSurrogate(seed=0, **FAST).fit(U, bad)
    label, why = verdict(m.loo_, 0.0, 0.9, [f"r{i}" for i in range(30)])
    assert label == "check the data" and "run r7 " in why
    clean = ResponseSurrogate(seed=0, **FAST).fit(U, y)
    assert verdict(clean.loo_, 0.0, 0.9)[0] != "check the data"
