"""Choosing the next runs: feasibility, no duplicates, criteria, stopping rule, and that adaptive
additions beat space-filling additions on published test functions."""
import numpy as np
import pytest

from doe.testing import functions as tf
from doe.design.adaptive import MIN_DISTANCE, propose_runs, run_adaptive
from doe.errors import SurrogateError
from doe.design.plans import candidates, greedy_maximin, maximin_lhs
from doe.study.reader import read_study_text
from doe.surrogate.gp import ResponseSurrogate
from doe.workflow.fit import fit_surrogates
from test_surrogate import STUDY, branin_results

FAST = dict(kernel="sqexp", trend="constant", restarts=2)
CONSTRAINED = STUDY.replace("[[responses]]", """[[constraints]]
name = "corner_cut"
terms = { x1 = 1.0, x2 = 1.0 }
max = 15.0

[[responses]]""", 1) + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 2\n"


@pytest.fixture(scope="module")
def fitted():
    study = read_study_text(CONSTRAINED)
    res = branin_results(study)
    keep = study.space.feasible(res.X())
    res.frame = res.frame[keep].reset_index(drop=True)
    return study, res, fit_surrogates(study, res, seed=0)


@pytest.mark.parametrize("aim,criterion", [("map", "ivr_posterior"), ("map", "ivr"), ("map", "variance"),
                                           ("map", "eigf"), ("optimum", "ei")])
def test_proposals_are_feasible_new_and_explained(fitted, aim, criterion):
    study, res, sset = fitted
    pending = study.space.from_unit(np.array([[0.1, 0.1], [0.2, 0.5]]))
    p = propose_runs(sset, 5, aim=aim, criterion=criterion, pending=pending, taken_ids=list(res.frame["run_id"]),
                     seed=1)
    X = p.frame[study.space.names].to_numpy()
    assert list(p.frame.columns) == ["run_id", "x1", "x2"]
    assert study.space.feasible(X).all()
    U = study.space.to_unit(X)
    old = np.vstack([study.space.to_unit(res.X()), study.space.to_unit(pending)])
    allpts = np.vstack([old, U])
    dist = np.sqrt(((allpts[:, None] - allpts[None]) ** 2).sum(-1)) + np.eye(len(allpts)) * 9
    assert dist[len(old):].min() > MIN_DISTANCE          # no duplicate of an old, pending or picked run
    last = max(int(r[1:]) for r in res.frame["run_id"])
    assert list(p.frame["run_id"]) == [f"r{i:03d}" for i in range(last + 1, last + 6)]  # numbering continues
    assert all(pick.reason for pick in p.picks) and p.to_dict()["criterion"] == criterion


def test_bad_requests_are_refused(fitted):
    _, _, sset = fitted
    with pytest.raises(SurrogateError, match="aim"):
        propose_runs(sset, 2, aim="explore")
    with pytest.raises(SurrogateError, match="criterion"):
        propose_runs(sset, 2, aim="map", criterion="ei")
    with pytest.raises(SurrogateError, match="goal"):
        propose_runs(sset, 2, aim="optimum", response="g")


def test_stopping_rule(fitted):
    study, res, sset = fitted
    # the rule: leave-one-out q2 of what predicts each response, and the 5 % quantile of its posterior q2 draws
    sset.target_q2 = min(min(sset.loo(n).q2, sset.q2_low(n)) for n in sset.models) - 0.01
    assert propose_runs(sset, 1, seed=0).accuracy_met
    assert "already met" in propose_runs(sset, 1, seed=0).notes[0]
    sset.target_q2 = 0.999999
    assert not propose_runs(sset, 1, seed=0).accuracy_met
    # a response whose lower q2 quantile misses the target stops nothing, whatever its q2_loo
    name = next(iter(sset.models))
    sset.target_q2 = min(min(sset.loo(n).q2, sset.q2_low(n)) for n in sset.models) - 0.01
    sset.uncertainty[name] = {**sset.uncertainty[name], "q2_low": sset.target_q2 - 0.05}
    assert not sset.meets_target(name) and not propose_runs(sset, 1, seed=0).accuracy_met
    sset.target_q2 = 0.9


def test_expected_improvement_finds_branin_minimum():
    # Branin minimum 5/(4 pi) = 0.397887 (Branin & Hoo 1972; Dixon & Szego 1978). Jones, Schonlau &
    # Welch 1998 report that EGO finds it within about 1 % in ~28 evaluations (memory); we allow 12 + 16
    # runs and ask for a value within 0.1 of the minimum (0.3 % of the function's range on the domain)
    f = tf.get("branin")
    space = f.space()
    U0 = maximin_lhs(12, 2, seed=0)
    U, y, _ = run_adaptive(f.on_unit, space, U0, 16, batch=2, refit_every=2, seed=0, aim="optimum",
                           goal="minimize", **FAST)
    assert y.min() <= 5 / (4 * np.pi) + 0.1
    assert y[:12].min() > 5 / (4 * np.pi) + 0.1                    # the first plan alone had not found it


def _test_error(model, f, Ut, yt):
    return float(np.mean((model.predict(Ut) - yt) ** 2) / np.var(yt))


@pytest.mark.parametrize("name,n0,n_add", [("branin", 10, 10),
                                           pytest.param("hartmann3", 15, 15, marks=pytest.mark.slow)])
def test_adaptive_beats_space_filling_additions(name, n0, n_add):
    # Functions: Surjanovic & Bingham (VLSE). Same first plan, same number of added runs: integrated
    # variance reduction (Cohn 1996) against greedy maximin additions (Johnson, Moore & Ylvisaker 1990);
    # relative test-set error 1 - q2 on 2000 uniform points, averaged over 4 seeds. Measured when written:
    # branin 0.0025 (adaptive) vs 0.0232 (maximin), hartmann3 0.062 vs 0.086.
    f = tf.get(name)
    space = f.space()
    Ut = np.random.default_rng(99).random((2000, f.dim))
    yt = f.on_unit(Ut)
    adaptive, filling = [], []
    for seed in range(4):
        U0 = maximin_lhs(n0, f.dim, seed=seed)
        C = candidates(space, 4096, np.random.default_rng(seed))
        Ua = np.vstack([U0, greedy_maximin(C, n_add, existing=U0)])
        filling.append(_test_error(ResponseSurrogate(seed=seed, **FAST).fit(Ua, f.on_unit(Ua)), f, Ut, yt))
        _, _, model = run_adaptive(f.on_unit, space, U0, n_add, batch=2, refit_every=2, seed=seed, **FAST)
        adaptive.append(_test_error(model, f, Ut, yt))
    assert np.mean(adaptive) < np.mean(filling)


def test_capped_copy_keeps_data_and_limits_length_scales():
    f = tf.get("branin")
    U = np.random.default_rng(0).random((12, 3))          # third input irrelevant: its length scale grows
    y = f.on_unit(U[:, :2])
    m = ResponseSurrogate(seed=0, **FAST).fit(U, y)
    c = m.capped(1.0)
    assert np.all(c.length_scales_ <= 1.0 + 1e-12) and np.array_equal(c.X_unit_, m.X_unit_)
    assert m.length_scales_[2] > 1.0                       # the original is untouched


def _integrated_variance_after(sset, X, R):
    """Posterior variance averaged over ``R`` after one run at each row of ``X``, per response averaged over all
    its draws (each draw's own full covariance; Rasmussen & Williams 2006 eq. 2.24), summed over responses."""
    total = 0.0
    for name in sset.models:
        draws = sset.posteriors[name].draws_
        after = []
        for draw in draws:
            _, cov = draw._posterior_normalised(np.vstack([R, X]) - 0.5, full_cov=True)
            c, v = cov[:len(R), len(R):], np.diag(cov)[len(R):] + draw.nugget_ + draw.noise_var_n_
            after.append(np.mean(np.diag(cov)[:len(R)]) - np.mean(c**2, axis=0) / v)
        total = total + np.mean(after, axis=0)
    return total


def test_default_map_criterion_is_the_posterior_ivr_batch(fitted):
    study, res, sset = fitted
    assert {sset.method(n) for n in sset.models} >= {"mixture"}     # f's kernel settings are uncertain here
    p = propose_runs(sset, 2, seed=4)
    assert p.criterion == "ivr_posterior" and "(draws: f 8; the other responses" in p.picks[0].reason
    assert p.to_dict()["batch"].startswith("exact") and "given the 1 run(s) picked before" in p.picks[1].reason
    # the first pick should leave less integrated variance (averaged over every draw, on reference points of
    # its own) than nearly all of 200 other feasible points. Measured when written: none of the 200 is better
    # for this pick; 2 % are better than the capped plug-in "ivr" pick, 3 % than "variance", 38 % than
    # "eigf". The criterion averages 8 of the 16 draws over other reference points, hence 1 % rather than 0
    rng = np.random.default_rng(11)
    R = candidates(study.space, 256, rng)
    others = candidates(study.space, 256, rng)[:200]
    x = study.space.to_unit(p.frame[study.space.names].to_numpy()[:1])[0]
    after = _integrated_variance_after(sset, np.vstack([x, others]), R)
    assert np.mean(after[1:] < after[0]) <= 0.01


@pytest.mark.parametrize("criterion", ["ivr_posterior", "ivr", "variance", "eigf"])
def test_stepped_knobs_get_new_settings_on_their_steps(criterion):
    # Both knobs stepped (7 x 6 settings): candidates scored between the steps and snapped afterwards
    # could land on a setting already run or picked; every proposal must be a new setting on the steps.
    from conftest import study_text
    from doe.runs.results import ResultsTable
    import pandas as pd

    study = read_study_text(study_text("steps", [("x1", "-", -5.0, 10.0, {"step": 2.5}),
                                                  ("x2", "-", 0.0, 15.0, {"step": 3.0})], [("f", "-", "minimize")])
                            + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 2\n")
    X = study.space.from_unit(maximin_lhs(12, 2, seed=4))
    X = np.unique(X, axis=0)
    frame = pd.DataFrame(X, columns=["x1", "x2"])
    frame.insert(0, "run_id", [f"r{i:03d}" for i in range(1, len(X) + 1)])
    frame["f"], frame["status"], frame["source"] = tf.get("branin")(X), "ok", "test"
    sset = fit_surrogates(study, ResultsTable(frame, ["x1", "x2"], ["f"]), seed=0)
    new = propose_runs(sset, 8, aim="map", criterion=criterion, seed=2).frame[["x1", "x2"]].to_numpy()
    assert np.allclose(new[:, 0], np.round(new[:, 0] / 2.5) * 2.5) and np.allclose(new[:, 1], np.round(new[:, 1] / 3) * 3)
    settings = {tuple(r) for r in np.round(X, 9)}
    picked = [tuple(r) for r in np.round(new, 9)]
    assert len(set(picked)) == len(picked) and not settings & set(picked)
