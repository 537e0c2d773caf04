"""The study report: figures (matplotlib) and one self-contained HTML page (Jinja2)."""
from .build import CAUTIONS, MODEL_LIMITS, ReportInputs, build_report

__all__ = ["ReportInputs", "build_report", "CAUTIONS", "MODEL_LIMITS"]
