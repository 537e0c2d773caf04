"""Wing-body coupling of the built-in model: the wing feels the body's flow relieved like the body's loads."""
from __future__ import annotations

import numpy as np
import pytest

from doe.aero.model import RearPackageModel

# the roof is 263 mm above the hatch edge and the chord 240 mm: one and 1.4 chords above the roof
HIGH = {"wing_height": [503.0, 600.0], "wing_overhang": [0.0, 0.0], "wing_aoa": [6.0, 6.0]}


def test_wing_well_above_the_roof_lifts_as_in_free_air():
    # the check (common practice, no source: a body's disturbance decays within a few of its
    # heights in 3-D): a wing more than a chord above the roof gives within 10 % of its isolated lift
    model = RearPackageModel()
    installed = model.evaluate(HIGH).values["cl_wing"]
    alone = model.isolated_wing(HIGH)
    np.testing.assert_allclose(installed, alone, rtol=0.10)


def test_wing_lift_responds_to_the_3d_body_factor():
    # the body's influence on the wing scales with the same 3-D factor as the body's loads: a wing near the
    # hatch loses lift to the body's flow, the more so the stronger that flow
    base = RearPackageModel()
    pts = {"wing_height": [80.0], "wing_aoa": [6.0]}
    cl = [base.with_coefficients(body_3d_factor=k).evaluate(pts).values["cl_wing"][0] for k in (0.05, 0.12, 0.3)]
    assert abs(cl[2] - cl[0]) > 0.05
    assert np.all(np.diff(cl) > 0)                      # less downforce (cl less negative) as the body counts more
    # with a vanishing body factor the wing tends to its isolated lift
    weak = base.with_coefficients(body_3d_factor=0.03).evaluate(pts).values["cl_wing"][0]
    assert weak == pytest.approx(base.isolated_wing(pts)[0], rel=0.05)
