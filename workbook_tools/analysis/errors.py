"""The one exception type every front end turns into a readable message."""

from __future__ import annotations


class TrialInputError(ValueError):
    """A problem with the user's data or options, worded for a spreadsheet user.

    Parameters
    ----------
    message : str
        What is wrong and, where it helps, what to do about it.
    sheet : str, optional
        Worksheet the problem is on, when it comes from a workbook.
    cell : str, optional
        Cell address (``B7``) or range (``B3:G9``) the problem is in.

    Notes
    -----
    ``str(error)`` gives the full message with the place in front
    (``Sheet 'Trial', cell C4: ...``), so every front end shows the same words.
    """

    def __init__(self, message: str, *, sheet: str | None = None, cell: str | None = None):
        self.message = message
        self.sheet = sheet
        self.cell = cell
        super().__init__(self.__str__())

    @property
    def where(self) -> str:
        """The place of the problem as text, empty when there is none."""
        if self.sheet and self.cell:
            return f"Sheet '{self.sheet}', cell {self.cell}"
        if self.sheet:
            return f"Sheet '{self.sheet}'"
        if self.cell:
            return f"Cell {self.cell}"
        return ""

    def located(self, *, sheet: str | None = None, cell: str | None = None) -> "TrialInputError":
        """Return a copy with the place filled in where it was not known yet."""
        return TrialInputError(self.message, sheet=self.sheet or sheet, cell=self.cell or cell)

    def __str__(self) -> str:
        where = self.where
        return f"{where}: {self.message}" if where else self.message
