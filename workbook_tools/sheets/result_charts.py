"""Which native charts each result sheet gets, and which table columns they read."""

from __future__ import annotations

from workbook_tools.sheets import charts
from workbook_tools.sheets.writer import Placement

# column positions inside the layout's tables (see workbook_tools.layout)
MEANS_LABEL, MEANS_ADJUSTED, MEANS_LOW, MEANS_HIGH, MEANS_HALF = 0, 3, 5, 6, 7
RESIDUALS_FITTED, RESIDUALS_STANDARDIZED = 3, 5


def _right_of(placement: Placement, width: int) -> tuple[int, int]:
    return placement.header_row, placement.first_col + width + 1


def result_chart_requests(ws, family: str, placements: dict[str, Placement]) -> list[tuple]:
    """The charts of one result sheet, as ``(chart function, keyword arguments)`` pairs.

    ``ws`` holds the tables already (a means chart needs interval half-widths to draw).
    """
    requests = []
    if family == "means" and "means" in placements:
        p = placements["means"]
        if p.last_row >= p.first_row and ws.cell(p.first_row, p.col(MEANS_HALF)).value is not None:
            requests.append((charts.add_means_chart, dict(
                label_col=p.col(MEANS_LABEL), mean_col=p.col(MEANS_ADJUSTED), low_col=p.col(MEANS_LOW),
                high_col=p.col(MEANS_HIGH), plus_col=p.col(MEANS_HALF), minus_col=p.col(MEANS_HALF),
                first_row=p.first_row, last_row=p.last_row, anchor=_right_of(p, 10),
                title="Adjusted treatment means with confidence intervals", y_title="Adjusted mean",
            )))
    if family == "residuals" and "residuals" in placements and "qq" in placements:
        r, q, line = placements["residuals"], placements["qq"], placements["qq_line"]
        if r.last_row < r.first_row:
            return requests
        anchor_col = q.first_col + 3
        if q.last_row < q.first_row:   # no standardized residual is defined (an exact fit): no plots
            return requests
        requests.append((charts.add_qq_chart, dict(
            x_col=q.col(0), y_col=q.col(1), first_row=q.first_row, last_row=q.last_row,
            line_x_col=line.col(0), line_y_col=line.col(1), line_first_row=line.first_row,
            line_last_row=line.last_row, anchor=(r.header_row, anchor_col),
        )))
        requests.append((charts.add_residual_chart, dict(
            x_col=r.col(RESIDUALS_FITTED), y_col=r.col(RESIDUALS_STANDARDIZED), first_row=r.first_row,
            last_row=r.last_row, anchor=(r.header_row + 20, anchor_col),
        )))
    return requests


def add_result_charts(ws, family: str, placements: dict[str, Placement]) -> None:
    """Add the charts of one result sheet next to the tables they plot."""
    for add, kwargs in result_chart_requests(ws, family, placements):
        add(ws, **kwargs)
