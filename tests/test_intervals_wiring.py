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
