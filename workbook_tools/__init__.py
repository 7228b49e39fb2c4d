"""workbook-tools: randomised complete block analysis for spreadsheet users.

Public face: :func:`analyze_grid`, :func:`analyze_records`, :data:`version`.
The engine is imported on first use, so a command that needs no statistics
starts quickly.
"""

from workbook_tools.analysis.errors import TrialInputError

__version__ = "0.1.0"
version = __version__

__all__ = ["TrialInputError", "analyze_grid", "analyze_records", "__version__", "version"]


def __getattr__(name):
    if name in ("analyze_grid", "analyze_records"):
        from workbook_tools import api

        return getattr(api, name)
    raise AttributeError(f"module 'workbook_tools' has no attribute {name!r}")
