"""Command line front end (filled in by the workbook issue)."""


def main(argv=None) -> int:  # pragma: no cover - replaced by the real front end
    raise SystemExit("workbook-tools: command line not built yet")
