"""workbook-tools: randomised complete block analysis for spreadsheet users."""

from workbook_tools.analysis.errors import TrialInputError

__version__ = "0.1.0"
version = __version__

__all__ = ["TrialInputError", "__version__", "version"]
