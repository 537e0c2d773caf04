"""Choice knobs of the built-in model: named levels that change the geometry it solves.

A choice knob of a study (``levels = [...]``) whose name is one of
:data:`CHOICE_INPUTS` selects, run by run, part of the geometry the panel
method solves; nothing is looked up from a table of results.

=============== ================================================= ==========================================
knob            levels                                             what changes in the solved geometry
=============== ================================================= ==========================================
wing_section    a NACA 4-digit name (``naca4412``, ``4412``), or   the wing's section contour (NACA 4-digit
                a coordinate file (``sections/high_lift.dat``,     equations, or the file's points repanelled)
                relative to the study file)
flap_position   ``hatch_edge``, ``roof_edge``, or a number 0-100   the flap's root on the rear window (0: the
                (% of the window up from the hatch edge)           hatch edge, 100: the roof's rear edge)
flap            ``on``, ``off``                                    off: no flap (flap_chord 0)
wing            ``on``, ``off``                                    off: the car and its flap alone
=============== ================================================= ==========================================

Runs are grouped by the levels that change the model's fixed settings (the
section and the wing's presence) and each group is solved by its own
:class:`~doe.aero.model.RearPackageModel`; the flap levels change the
run's inputs.

A wing section chosen here, like any other change, alters the car's handling at
speed: the model ranks and plans, it does not certify loads, and only validated
testing and the class's scrutineers settle what is safe and legal.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import AeroError
from .model import DESIGN_INPUTS, OUTPUTS, ModelResult, ModelSettings, RearPackageModel
from .sections import naca4, parse_naca, read_coords

__all__ = ["CHOICE_INPUTS", "LevelSetting", "level_setting", "ChoiceModel"]

#: Choice knobs the model understands: name -> what the levels are.
CHOICE_INPUTS = {
    "wing_section": "a NACA 4-digit name (naca4412, 4412, naca_4412) or a coordinate file relative to the study",
    "flap_position": "hatch_edge, roof_edge, or a number 0 to 100 (% of the rear window up from the hatch edge)",
    "flap": "on or off (off: no flap)",
    "wing": "on or off (off: the car and its flap alone)",
}

_PLACES = {"hatch_edge": 0.0, "roof_edge": 100.0}
_SWITCH = {"on": True, "off": False}


@dataclass(frozen=True)
class LevelSetting:
    """What one level of a choice knob does to the model.

    Attributes
    ----------
    settings : dict
        Changes to :class:`~doe.aero.model.ModelSettings` (``wing_section``, ``has_wing``).
    inputs : dict
        Model inputs the level sets, model units (``flap_chord`` in mm, ``flap_position`` in %).
    """

    settings: dict = field(default_factory=dict)
    inputs: dict = field(default_factory=dict)


def level_setting(knob: str, level: str, wing_panels: int = 60, folder: Path | str = ".") -> LevelSetting:
    """Translate one level of a choice knob into settings and inputs of the model.

    Parameters
    ----------
    knob : str
        One of :data:`CHOICE_INPUTS`.
    level : str
        The level name (see the module docstring).
    wing_panels : int
        Panels on the wing section.
    folder : path
        Folder that a coordinate file's name is relative to (the study's).

    Returns
    -------
    LevelSetting

    Raises
    ------
    AeroError
        One line, for an unknown knob, an unknown level or a section file that cannot be used.
    """
    if knob not in CHOICE_INPUTS:
        raise AeroError(f"'{knob}' is not a choice of the builtin model (choices: {', '.join(CHOICE_INPUTS)})")
    if knob == "wing_section":
        return LevelSetting(settings={"wing_section": _section(level, wing_panels, Path(folder))})
    if knob == "flap_position":
        return LevelSetting(inputs={"flap_position": _place(level)})
    on = _SWITCH.get(str(level).strip().lower())
    if on is None:
        raise AeroError(f"'{level}' is not a level of {knob}: use on or off")
    if knob == "wing":
        return LevelSetting(settings={"has_wing": on})
    return LevelSetting(inputs={} if on else {"flap_chord": 0.0})


def _section(level: str, wing_panels: int, folder: Path):
    """A section from a NACA 4-digit name, else from a coordinate file (Abbott & von Doenhoff 1959, §6.4)."""
    try:
        m, p, t = parse_naca("".join(ch for ch in str(level) if ch not in "-_ "))   # naca-2412, NACA_2412
    except AeroError:
        pass
    else:
        return naca4(m, p, t, wing_panels)
    path = Path(level)
    path = path if path.is_absolute() else folder / path
    if not path.is_file():
        raise AeroError(f"wing_section level '{level}' is neither a NACA 4-digit name (e.g. naca4412) nor a file "
                        f"({path} not found)")
    return read_coords(path, n_panels=wing_panels)


def _place(level: str) -> float:
    key = str(level).strip().lower()
    if key in _PLACES:
        return _PLACES[key]
    try:
        value = float(key)
    except ValueError:
        value = np.nan
    if not 0.0 <= value <= 100.0:
        raise AeroError(f"'{level}' is not a level of flap_position: use hatch_edge, roof_edge or a number 0 to 100 "
                        f"(% of the rear window)")
    return value


class ChoiceModel:
    """The built-in model with choice knobs: one :class:`RearPackageModel` per combination of settings.

    Parameters
    ----------
    settings : ModelSettings
        The fixed settings (a level that changes a setting overrides it).
    knobs : dict of str to sequence of str
        Choice knob name (one of :data:`CHOICE_INPUTS`) -> its level names.
    folder : path
        Folder that coordinate files are relative to.

    Raises
    ------
    AeroError
        When a knob or a level is unknown, a section file is unusable, or a
        knob clashes with a fixed setting (``wing_section`` with a fixed section).
    """

    def __init__(self, settings: ModelSettings, knobs: dict, folder: Path | str = "."):
        self.settings = settings
        if "wing_section" in knobs and settings.wing_section is not None:
            raise AeroError("the wing's section is a choice knob; do not also fix it with wing_section")
        self.levels = {k: [level_setting(k, v, settings.wing_panels, folder) for v in levels]
                       for k, levels in knobs.items()}
        self._models = {}

    def _model(self, key: tuple) -> RearPackageModel:
        """The model of one combination of setting-changing levels (built once)."""
        if key not in self._models:
            changes = {}
            for knob, i in key:
                changes.update(self.levels[knob][i].settings)
            self._models[key] = RearPackageModel(replace(self.settings, **changes))
        return self._models[key]

    def evaluate(self, points: dict, choices: dict, **kwargs) -> ModelResult:
        """Evaluate configurations with their levels.

        Parameters
        ----------
        points : dict of str to array_like
            Continuous model inputs in model units (as :meth:`RearPackageModel.evaluate`).
        choices : dict of str to array_like of int
            Level index per configuration of each choice knob.
        **kwargs
            Passed to :meth:`RearPackageModel.evaluate`.

        Returns
        -------
        ModelResult
        """
        n = max([np.size(v) for v in points.values()] + [np.size(v) for v in choices.values()] + [1])
        idx = {k: np.broadcast_to(np.asarray(v, dtype=int), (n,)) for k, v in choices.items()}
        unknown = set(idx) - set(self.levels)
        if unknown:
            raise AeroError(f"no levels were given for the choice '{sorted(unknown)[0]}'")
        inputs = {k: np.broadcast_to(np.asarray(v, dtype=float), (n,)).copy() for k, v in points.items()}
        for knob, i in idx.items():
            for name in {m for s in self.levels[knob] for m in s.inputs}:
                base = inputs.get(name, np.full(n, self.settings.fixed.get(name, DESIGN_INPUTS[name].default)))
                inputs[name] = np.array([self.levels[knob][j].inputs.get(name, b) for j, b in zip(i, base)])
        setting_knobs = [k for k in idx if any(s.settings for s in self.levels[k])]
        keys = [tuple((k, int(idx[k][r])) for k in setting_knobs) for r in range(n)]
        return self._gather(inputs, keys, n, kwargs)

    def _gather(self, inputs, keys, n, kwargs) -> ModelResult:
        """Solve each group of configurations with its model and put the results back in order."""
        values = {k: np.full(n, np.nan) for k in OUTPUTS}
        ok = np.zeros(n, dtype=bool)
        messages = [""] * n
        cps = [None] * n
        for key in sorted(set(keys)):
            rows = np.array([r for r in range(n) if keys[r] == key])
            part = self._model(key).evaluate({k: v[rows] for k, v in inputs.items()}, **kwargs)
            for k in OUTPUTS:
                values[k][rows] = part.values[k]
            ok[rows] = part.ok
            for j, r in enumerate(rows):
                messages[r] = part.messages[j]
                cps[r] = part.cp[j] if part.cp else None
        return ModelResult(values, ok, messages, cps if kwargs.get("keep_cp") else [])
