"""The per-response surrogate over choice knobs that a study's surrogate set holds: fit, paths, records."""
from __future__ import annotations

import json

import numpy as np

from doe.surrogate.levelset import LevelResponseSurrogate, level_unit_sample
from doe.testing.functions import ADDITIVE_LEVEL_EFFECTS, additive_levels, hartmann3_levels

LEVELS = [0, 0, len(ADDITIVE_LEVEL_EFFECTS)]


def _runs(per_level=8, seed=1, f=additive_levels, levels=LEVELS):
    rng = np.random.default_rng(seed)
    X = np.vstack([np.column_stack([rng.random((per_level, 2)), np.full(per_level, c)])
                   for c in range(levels[-1])])
    return X, f(X)


def test_additive_levels_fit_well_and_rebuild_from_plain_json():
    X, y = _runs()
    m = LevelResponseSurrogate(LEVELS, ["x1", "x2", "c"], seed=0).fit(X, y, spans=[1.0, 1.0, 2.0])
    U = level_unit_sample(LEVELS, 256, seed=5)
    truth = additive_levels(U)
    # an additive function with a shared g(x) (Sobol' 1993; additive_levels): the levels share all their
    # structure, so 8 runs per level predict new points to a q2 above 0.9 (common practice, no source)
    q2 = 1 - np.mean((m.predict(U) - truth) ** 2) / np.var(truth)
    assert q2 > 0.9 and m.loo_.q2 > 0.9 and m.q2_low_ <= 1.0
    assert m.kind_ in ("mixed", "separate") and sum(c["chosen"] for c in m.candidates_) == 1
    record = json.loads(json.dumps(m.to_dict(), allow_nan=False))          # plain JSON, nothing executed
    back = LevelResponseSurrogate.from_dict(record, X, y)
    np.testing.assert_allclose(back.predict(U), m.predict(U), rtol=1e-10, atol=1e-12)
    assert back.q2_low_ == m.q2_low_ and back.statements_ == m.statements_


def test_paths_centre_on_the_mean_for_both_kinds():
    # Hartmann 3-D with its third input held (levels that share little): separate GPs can win there
    X, y = _runs(per_level=10, f=lambda X: hartmann3_levels(X, column=2), levels=[0, 0, 3])
    m = LevelResponseSurrogate([0, 0, 3], ["x1", "x2", "c"], seed=0).fit(X, y)
    U = level_unit_sample([0, 0, 3], 64, seed=2)
    draws = m.sample_paths(U, 400, seed=3)
    mean, std = m.predict(U, return_std=True)
    assert draws.shape == (400, 64)
    # 400 draws: the sample mean lies within 4 standard errors of the posterior mean (normal theory)
    assert np.all(np.abs(draws.mean(axis=0) - mean) <= 4 * std / np.sqrt(400) + 1e-9)


def test_constant_response_predicts_its_value():
    X, _ = _runs(per_level=3)
    m = LevelResponseSurrogate(LEVELS, ["x1", "x2", "c"]).fit(X, np.full(len(X), 0.25))
    assert m.constant_ and np.all(m.predict(X[:4]) == 0.25)
    back = LevelResponseSurrogate.from_dict(json.loads(json.dumps(m.to_dict())), X, np.full(len(X), 0.25))
    assert np.all(back.sample_paths(X[:4], 3, seed=0) == 0.25)
