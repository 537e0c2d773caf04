"""The default fit's hyperparameter posterior, wired into bands, Sobol intervals and verdicts, on Ishigami."""
import numpy as np
import pytest
from scipy.stats import qmc

from doe.design.plans import maximin_lhs
from doe.sensitivity.inputs import InputDistribution
from doe.sensitivity.sobol import sobol_indices
from doe.surrogate.gp import ResponseSurrogate
from doe.surrogate.set import SurrogateSet
from doe.testing import functions as tf
from doe.workflow.fit import fit_uncertainty
from doe.workflow.sensitivity import surrogate_callables


def _sets(n, seed):
    f = tf.get("ishigami")
    U = maximin_lhs(n, 3, seed=seed)
    gp = ResponseSurrogate(seed=seed).fit(U, f.on_unit(U))
    out = {}
    for mode in ("plugin", "auto"):
        post, rec = fit_uncertainty(gp, mode, seed)
        out[mode] = SurrogateSet(f.space(), {"y": gp}, {"y": "-"}, {"y": "none"}, [str(i) for i in range(n)], 0.9,
                                 posteriors={"y": post} if post is not None else {}, uncertainty={"y": rec})
    return f, out


@pytest.fixture(scope="module")
def ishigami_30():
    return _sets(30, 0)


def test_default_band_holds_held_out_errors_where_the_plugin_band_does_not(ishigami_30):
    # Ishigami & Homma (1990) with 30 maximin runs (10 per input): the 2-sigma band of the default fit should hold
    # about 95 % of held-out errors (measured 0.97 on these 512 Sobol' points; the issue's band 90-99 %); the
    # plug-in band of the same surrogate held 0.92 here and 0.65 with seed 1 (benchmarks/bench_intervals.py)
    f, sets = ishigami_30
    U = qmc.Sobol(3, scramble=True, seed=5).random(512)
    y = f.on_unit(U)
    assert sets["auto"].method("y") == "mixture"
    mean, std = sets["auto"].predictor("y").predict(U, return_std=True)
    assert 0.90 <= np.mean(np.abs(mean - y) <= 2 * std) <= 0.995


def test_default_sobol_intervals_hold_the_analytic_indices(ishigami_30):
    # analytic indices: Sobol' & Levitan (1999), Comput. Phys. Commun. 117:52 (tf.ishigami_indices). With 30 runs the
    # surrogate has not resolved x3's interaction: the default intervals must hold all six (measured 6 of 6) and
    # say that the knobs cannot be ranked yet; they are wide (half-widths 0.2-0.6), which is the honest answer
    f, sets = ishigami_30
    ref = tf.ishigami_indices()
    truth = np.r_[ref["S1"], ref["ST"]]
    model, paths = surrogate_callables(sets["auto"])
    res = sobol_indices(model, InputDistribution.uniform(f.space()), paths=paths, base_samples=2**10, n_paths=32,
                        seed=0)["y"]
    assert np.all(np.abs(np.r_[res.S1, res.ST] - truth) <= np.r_[res.S1_pm95, res.ST_pm95])
    assert res.too_few_runs


def test_verdict_numbers_come_from_the_posterior(ishigami_30):
    # Ishigami from 30 runs is far from q2 0.9 (held-out q2 about 0.5): not ready by either number
    _, sets = ishigami_30
    rep = sets["auto"].fit_report()["y"]
    assert rep["uncertainty"] == "mixture" and rep["verdict"] == "add runs"
    assert rep["q2_loo"] == pytest.approx(sets["auto"].posteriors["y"].loo()["q2"], rel=1e-12)
    assert rep["q2_low"] < 0.9 and rep["q2_loo"] < 0.9
    assert sets["plugin"].fit_report()["y"]["uncertainty"] == "plugin"


def _ishigami_indices_from_runs(n, seed, gp_options, **sobol_options):
    """Largest |index - analytic| and the result, from n maximin runs through the default fit's posterior."""
    f = tf.get("ishigami")
    U = maximin_lhs(n, 3, seed=seed)
    gp = ResponseSurrogate(seed=seed, **gp_options).fit(U, f.on_unit(U))
    post, rec = fit_uncertainty(gp, "auto", seed)
    sset = SurrogateSet(f.space(), {"y": gp}, {"y": "-"}, {"y": "none"}, [str(i) for i in range(n)], 0.9,
                        posteriors={"y": post}, uncertainty={"y": rec})
    model, paths = surrogate_callables(sset)
    res = sobol_indices(model, InputDistribution.uniform(f.space()), paths=paths, seed=seed, **sobol_options)["y"]
    ref = tf.ishigami_indices()
    return float(np.max(np.abs(np.r_[res.S1 - ref["S1"], res.ST - ref["ST"]]))), res, post


def test_ishigami_from_100_runs_within_003():
    # Analytic indices: Ishigami & Homma (1990); Sobol' & Levitan (1999), Comput. Phys. Commun. 117:52
    # (tf.ishigami_indices). The accuracy: largest S1/ST error at most 0.03 from 100 runs (goal 0.02).
    # The surrogate is fitted with the default's kernel (Matern 5/2, linear trend) fixed, so that the test skips
    # the plug-in's kernel search; the posterior is the default's (structure chosen by evidence). Plan seed 3, the
    # worst of five: measured 0.0106 with a base sample of 2^13; the posterior with one joint term only (the
    # default before) gave 0.064 on this plan (base sample 2^11, benchmarks/bench_intervals.py settings).
    err, res, post = _ishigami_indices_from_runs(100, 3, dict(kernel="matern52", trend="linear", restarts=1),
                                                 base_samples=2**13, n_paths=32)
    assert post.structure_ == "additive"       # Ishigami is mostly a sum of one-input terms
    assert err <= 0.03


@pytest.mark.slow
def test_ishigami_from_100_runs_default_route_several_plans():
    # As above with everything at its default (the plug-in's kernel search, the sensitivity's adaptive base
    # sample) over five maximin plans; measured largest errors 0.0012-0.0094 (benchmarks/bench_intervals.py table)
    errs = [_ishigami_indices_from_runs(100, seed, {})[0] for seed in range(5)]
    assert max(errs) <= 0.03
    assert np.mean(errs) <= 0.02


def test_fit_json_kernel_describes_what_predicts(ishigami_30):
    # fit.json's kernel and length scales are those of the posterior that predicts (median over its draws for a
    # mixture); the fitted surrogate's stay beside them under plugin_*
    _, sets = ishigami_30
    post = sets["auto"].posteriors["y"]
    rep = sets["auto"].fit_report()["y"]
    summary = post.kernel_summary()
    assert rep["kernel"] == summary["label"] and rep["kernel_structure"] == post.structure_
    assert rep["kernel_settings"] == "median over the draws"
    med = np.exp(np.median(post.thetas_[:, 1:4], axis=0))        # joint term's ln l_1..l_3
    np.testing.assert_allclose(list(rep["relative_length_scales"].values()), med, rtol=1e-12)
    np.testing.assert_allclose(list(rep["length_scales"].values()), med * 2 * np.pi, rtol=1e-12)   # range 2 pi
    gp = sets["auto"].models["y"]
    np.testing.assert_allclose(list(rep["plugin_relative_length_scales"].values()), gp.length_scales_, rtol=1e-12)
    plug = sets["plugin"].fit_report()["y"]
    assert plug["kernel"] == plug["plugin_kernel"] and plug["kernel_settings"] == "fitted"
