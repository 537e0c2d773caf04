"""The contract every surrogate kind meets (one Gaussian process; two fidelities).

One suite over each kind, on Currin's exponential function and its cheap form
(Currin, Mitchell, Morris & Ylvisaker 1991; the low form of Xiong, Qian & Wu
2013, :mod:`doe.testing.functions`), fitted on unit-cube points: an unfitted
surrogate refuses to predict; a fit returns the surrogate itself; predictions
interpolate noise-free runs, with a standard deviation >= 0 that is small there;
the saved form rebuilds an equal surrogate; conditioning on a new run keeps the
kind and interpolates it; posterior sample paths have the promised shape and
centre on the mean. To add a kind, add a case to ``KINDS``.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import qmc

import doe
from doe.testing import functions as tf

OPTIONS = dict(kernel="sqexp", trend="constant", restarts=0, seed=0)   # one kernel, no restarts: fast
CURRIN, CURRIN_LOW = tf.get_pair("currin")


def _unit(n, seed):
    return qmc.LatinHypercube(d=2, seed=np.random.default_rng(seed)).random(n)


def _f(U, fn):
    return fn(U)                        # Currin's pair lives on the unit square already


def _single():
    U = _unit(12, 1)
    model = doe.ResponseSurrogate(**OPTIONS)
    return model, (lambda: model.fit(U, _f(U, CURRIN))), U, CURRIN


def _two():
    U, UL = _unit(8, 1), _unit(24, 2)
    model = doe.TwoFidelitySurrogate(**OPTIONS, compare=False)
    return model, (lambda: model.fit(UL, _f(UL, CURRIN_LOW), U, _f(U, CURRIN))), U, CURRIN


KINDS = {"single": _single, "two": _two}


@pytest.fixture(params=sorted(KINDS), scope="module")
def fitted(request):
    model, fit, U, fn = KINDS[request.param]()
    unfitted_error = None
    try:
        model.predict(U[:1])
    except doe.DoeError as exc:
        unfitted_error = exc
    assert fit() is model
    return request.param, model, U, fn, unfitted_error


def test_unfitted_refuses_to_predict(fitted):
    _, _, _, _, error = fitted
    assert isinstance(error, doe.DoeError) and "fit" in str(error)


def test_interpolates_noise_free_runs(fitted):
    _, model, U, fn, _ = fitted
    y = _f(U, fn)
    mean, std = model.predict(U, return_std=True)
    # A fixed nugget of 1e-6 of the variance (doe.defaults.NUGGET) lets the mean miss the runs by
    # about sqrt(1e-6) of the response's spread at most; 1e-2 of the spread leaves room for that.
    assert np.max(np.abs(mean - y)) <= 1e-2 * np.ptp(y)
    # The std is >= 0 and smaller at the runs than between them: a two-fidelity std at a run is not
    # 0 (it carries the cheap level's fit and the discrepancy's noise there), so the check is relative.
    between = model.predict(_unit(200, 11), return_std=True)[1]
    assert np.all(std >= 0) and np.all(between >= 0)
    assert np.mean(std) < np.mean(between)


def test_saved_form_rebuilds_an_equal_surrogate(fitted):
    kind, model, U, _, _ = fitted
    record, arrays = model.to_dict(), model.to_arrays()
    if kind == "single":
        back = doe.ResponseSurrogate.from_dict(record, arrays["X"], arrays["y"])
    else:
        back = doe.TwoFidelitySurrogate.from_dict(record, arrays)
    X = _unit(50, 7)
    np.testing.assert_allclose(back.predict(X, return_std=True), model.predict(X, return_std=True),
                               rtol=1e-9, atol=1e-12)   # same hyperparameters and data: rounding only


def test_conditioning_keeps_the_kind_and_interpolates_the_new_run(fitted):
    _, model, _, fn, _ = fitted
    x = np.array([[0.37, 0.61]])
    more = model.conditioned(x, _f(x, fn))
    assert type(more) is type(model)
    assert more.predict(x)[0] == pytest.approx(_f(x, fn)[0], abs=1e-2 * abs(_f(x, fn)[0]))


def test_sample_paths_shape_and_centre(fitted):
    _, model, _, _, _ = fitted
    X = _unit(5, 3)
    paths = model.sample_paths(X, 400, seed=0)
    mean, std = model.predict(X, return_std=True)
    assert paths.shape == (400, 5)
    # 400 draws: the sample mean is within 4 standard errors (std / 20) of the posterior mean.
    assert np.all(np.abs(paths.mean(axis=0) - mean) <= 4 * std / 20 + 1e-9)
