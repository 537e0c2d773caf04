"""Where a calibration's model comes from: the builtin settings of a study's ``[evaluator]`` or ``[low_fidelity]``."""
from __future__ import annotations

from ..aero.model import ModelSettings
from ..errors import CalibrationError, where
from ..runs.evaluators.builtin import read_builtin_settings

__all__ = ["builtin_settings_for"]


def builtin_settings_for(study) -> tuple[ModelSettings, dict]:
    """The builtin model settings a study calibrates: its ``[evaluator]`` or its ``[low_fidelity]`` table.

    Parameters
    ----------
    study : Study

    Returns
    -------
    settings : ModelSettings
    conversion : dict
        Study parameter -> factor from the study's unit to the model's.

    Raises
    ------
    CalibrationError
        When neither table is of kind ``builtin``.
    """
    if study.evaluator.kind == "builtin":
        return read_builtin_settings(study)
    low = getattr(study, "low_fidelity", None)
    if low is not None and low.evaluator.kind == "builtin":
        return read_builtin_settings(study, low.evaluator)
    raise CalibrationError(f"{where(study.path)}: the evaluator is '{study.evaluator.kind}', so the builtin "
                           "model's settings must come from elsewhere: add a [low_fidelity] table with "
                           "kind = \"builtin\" and the builtin keys, or name a builtin study (--model-study)")
