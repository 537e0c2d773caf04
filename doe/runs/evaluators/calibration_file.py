"""The calibration file the builtin evaluator reads (``[evaluator] calibration = "file.json"``).

``doe calibrate`` writes the file (:mod:`doe.calibration.result`); the builtin
evaluator only needs its calibrated coefficients, read and checked here, so
the evaluators do not depend on the calibration engine.
"""
from __future__ import annotations

import json
from dataclasses import fields
from pathlib import Path

from ...checks import is_number
from ...aero.model import Coefficients
from ...errors import CalibrationError, DoeError

__all__ = ["FORMAT", "read_calibration_json", "read_calibrated_coefficients"]

#: Value of the JSON key ``format`` of a saved calibration.
FORMAT = "doe-calibration-1"


def read_calibration_json(path) -> dict:
    """The JSON object of a calibration file, checked for its ``format``."""
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot read the calibration ({exc.strerror or exc})") from exc
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CalibrationError(f"{path}: not a calibration JSON file ({exc})") from exc
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        raise CalibrationError(f"{path}: not a calibration written by 'doe calibrate' (format {FORMAT!r} expected)")
    return data


def read_calibrated_coefficients(path) -> dict:
    """The calibrated coefficients saved in ``path`` (name -> value), checked against their ranges.

    Raises
    ------
    CalibrationError
        Missing or unreadable file, wrong format, an unknown coefficient or a value outside its range.
    """
    data = read_calibration_json(path)
    values = data.get("coefficients")
    known = {f.name for f in fields(Coefficients)}
    if not isinstance(values, dict):
        raise CalibrationError(f"{path}: 'coefficients' must be a table of numbers")
    for k, v in values.items():
        if k not in known:
            raise CalibrationError(f"{path}: unknown coefficient '{k}' (coefficients: {', '.join(sorted(known))})")
        if not is_number(v):
            raise CalibrationError(f"{path}: coefficient '{k}' must be a number, got {v!r}")
    try:
        Coefficients(**values)
    except DoeError as exc:
        raise CalibrationError(f"{path}: {exc}") from exc
    return {k: float(v) for k, v in values.items()}
