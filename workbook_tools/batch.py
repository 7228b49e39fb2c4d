"""Many workbooks: ``workbook-tools batch IN_DIR --out OUT_DIR``.

Every workbook in a folder is analysed with the same options, each in its own
worker (a local process pool, or a Dask distributed cluster with
``--scheduler``). A file's problem never stops the batch: it becomes that
file's status in the summary. The worker receives the file's bytes and returns
the result workbook's bytes, so cluster workers need no shared folder.

This module is imported by the command-line parser, so heavy imports stay
inside the functions that need them.
"""

from __future__ import annotations

import os
import re
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")
RESULT_SUFFIX = "-analysed"
BEST_CHOICES = ("highest", "lowest")


@dataclass
class FileOutcome:
    """What one worker returns: the file's summary rows and its result workbook."""

    name: str
    rows: list[dict]
    result_name: str | None = None
    result_bytes: bytes | None = field(default=None, repr=False)

    @property
    def done(self) -> bool:
        return all(row["status"] == "done" for row in self.rows)


@dataclass
class BatchReport:
    """A finished batch: summary rows in file order and where the summary went."""

    rows: list[dict]
    summary_xlsx: Path
    summary_csv: Path
    refused: list[str]
    crashed: list[str]


def natural_key(name: str) -> list:
    """Sort key that orders numbers by value: ``week-2`` before ``week-10`` (case ignored)."""
    return [int(part) if part.isdigit() else part.casefold() for part in re.split(r"(\d+)", name)]


def find_workbooks(in_dir) -> list[Path]:
    """The workbooks directly in ``in_dir``, in natural file-name order.

    Skipped: Excel's lock files (``~$...``), results of this tool (``...-analysed``)
    and the batch summary itself, so an output folder inside the input folder is harmless.
    """
    from workbook_tools.analysis.errors import TrialInputError

    folder = Path(in_dir)
    if not folder.is_dir():
        raise TrialInputError(f"The folder '{folder}' does not exist.")
    books = [p for p in folder.iterdir() if p.is_file() and p.suffix.lower() in WORKBOOK_SUFFIXES
             and not p.name.startswith("~$") and not p.stem.endswith(RESULT_SUFFIX)
             and p.stem != "batch-summary"]
    if not books:
        raise TrialInputError(f"The folder '{folder}' holds no workbooks (.xlsx or .xlsm).")
    return sorted(books, key=lambda p: natural_key(p.name))


def summary_rows(analyses, best: str = "highest") -> list[dict]:
    """One summary row per analysed response (see :data:`workbook_tools.layout.BATCH_COLUMNS`)."""
    rows = []
    for analysis in analyses:
        d, s = analysis.as_dict(), analysis.source
        treatment = next(r for r in d["anova"] if r["source"] == "treatment")
        means = [m for m in d["means"] if m["adjusted_mean"] is not None]
        pick = max if best == "highest" else min
        top = pick(means, key=lambda m: m["adjusted_mean"]) if means else None  # ties: the first in sheet order
        groups = d["comparisons"]["groups"] or {}
        rows.append({
            "file": s["file"], "sheet": s["sheet"], "range": s["range"], "response": s["response"],
            "f": treatment["f"], "p": treatment["p"], "mse": d["summary"]["mse"],
            "cv_percent": d["summary"]["cv_percent"], "relative_efficiency": d["efficiency"]["relative"],
            "best_treatment": top and top["treatment"], "best_mean": top and top["adjusted_mean"],
            "best_group": groups.get(top["treatment"]) if top else None,
            "warnings": len(d["warnings"]), "first_warning": d["warnings"][0] if d["warnings"] else None,
            "status": "done",
        })
    return rows


def _status_row(name: str, status: str) -> dict:
    return {"file": name, "warnings": None, "status": status}


def analyse_workbook_bytes(name: str, data: bytes, range_text: str, options: dict,
                           prefix: str = "wbt-", best: str = "highest", limits=None) -> FileOutcome:
    """Analyse one workbook given as bytes; never raises for a problem with the file.

    Parameters
    ----------
    name : str
        The file's name (used in messages and for the result's name).
    data : bytes
        The workbook's content.
    range_text, options
        As for :func:`workbook_tools.sheets.book.analyse_book`.
    prefix : str
        Name prefix of the result sheets.
    best : {"highest", "lowest"}
        Which adjusted mean the summary calls the best treatment.
    limits : workbook_tools.sheets.limits.Limits, optional
        Limits for reading the file (default: the reader's defaults).

    Returns
    -------
    FileOutcome
        Rows with status "done", or one row with the reason the file was refused.
    """
    from workbook_tools.analysis.errors import TrialInputError
    from workbook_tools.sheets.book import analyse_book, write_analyses
    from workbook_tools.sheets.limits import applied
    from workbook_tools.sheets.safety import default_output_path

    name = Path(name).name
    with tempfile.TemporaryDirectory(prefix="wbt-batch-") as tmp:
        source = Path(tmp) / name
        source.write_bytes(data)
        result = Path(tmp) / "out" / default_output_path(source, RESULT_SUFFIX).name
        result.parent.mkdir()
        try:
            with applied(limits):
                analyses = analyse_book(source, range_text, **options)
            write_analyses(source, analyses, out=result, prefix=prefix, run_options={"range": range_text, **options})
            return FileOutcome(name, summary_rows(analyses, best), result.name, result.read_bytes())
        except TrialInputError as error:
            return FileOutcome(name, [_status_row(name, str(error))])
        except Exception as error:  # an internal error: recorded, the batch goes on
            return FileOutcome(name, [_status_row(name, f"internal error ({type(error).__name__}: {error})")])


def analyse_workbook_file(path: str, *args) -> FileOutcome:
    """:func:`analyse_workbook_bytes` reading the file in the worker (local pool: one shared disk)."""
    return analyse_workbook_bytes(Path(path).name, Path(path).read_bytes(), *args)


def _crashed(name: str, error: BaseException) -> FileOutcome:
    return FileOutcome(name, [_status_row(name, f"internal error: the worker stopped ({type(error).__name__}: "
                                                f"{error})")])


def _run_local(paths: list[Path], args: tuple, workers: int, tick, work) -> dict[str, FileOutcome]:
    """Run on a process pool; files caught in a broken pool are retried alone, each in a fresh process."""
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from concurrent.futures.process import BrokenProcessPool

    outcomes: dict[str, FileOutcome] = {}
    suspects: list[Path] = []
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = {pool.submit(work, str(p), *args): p for p in paths}
        for future in as_completed(futures):
            path = futures[future]
            try:
                outcomes[path.name] = future.result()
                tick()
            except BrokenProcessPool:
                suspects.append(path)
    for start in range(0, len(suspects), workers):
        alone = [(p, ProcessPoolExecutor(max_workers=1)) for p in suspects[start:start + workers]]
        running = [(p, pool, pool.submit(work, str(p), *args)) for p, pool in alone]
        for path, pool, future in running:
            try:
                outcomes[path.name] = future.result()
            except BrokenProcessPool as error:
                outcomes[path.name] = _crashed(path.name, error)
            finally:
                pool.shutdown()
            tick()
    return outcomes


def _run_on_cluster(paths: list[Path], args: tuple, address: str, tick, work) -> dict[str, FileOutcome]:
    """Run on a Dask distributed cluster: the file's bytes travel to the worker and back."""
    from workbook_tools.analysis.errors import TrialInputError

    try:
        from distributed import Client, as_completed
    except ImportError:
        raise TrialInputError("--scheduler needs Dask: pip install 'workbook-tools[cluster]'.") from None
    try:
        client = Client(address, timeout="10s")
    except (OSError, TimeoutError) as error:
        raise TrialInputError(f"Could not reach the Dask scheduler at {address} ({error}).") from None
    outcomes: dict[str, FileOutcome] = {}
    with client:
        futures = {client.submit(work, p.name, p.read_bytes(), *args, pure=False): p for p in paths}
        for future in as_completed(futures):
            path = futures[future]
            try:
                outcomes[path.name] = future.result()
            except Exception as error:  # a worker died (KilledWorker) or the task could not run
                outcomes[path.name] = _crashed(path.name, error)
            tick()
    return outcomes


def run_batch(in_dir, out_dir, range_text: str, *, workers: int | None = None, scheduler: str | None = None,
              prefix: str = "wbt-", best: str = "highest", limits=None, progress: bool = False,
              **options) -> BatchReport:
    """Analyse every workbook in ``in_dir`` and write results and a summary into ``out_dir``.

    Parameters
    ----------
    in_dir, out_dir : path-like
        Input folder (only read) and output folder (created when missing).
    range_text : str
        The range to analyse in every workbook.
    workers : int, optional
        Local pool size (default ``os.cpu_count()``); ignored with ``scheduler``.
    scheduler : str, optional
        Address of a Dask distributed scheduler, ``tcp://HOST:PORT``.
    prefix, best, limits
        See :func:`analyse_workbook_bytes`.
    progress : bool
        Show a progress bar on standard error.
    **options
        Reading and engine options of :func:`workbook_tools.sheets.book.analyse_book`.

    Returns
    -------
    BatchReport
    """
    from workbook_tools.sheets.batch_summary import write_batch_summary
    from workbook_tools.sheets.safety import atomic_write

    paths = find_workbooks(in_dir)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    args = (range_text, options, prefix, best, limits)
    bar = _progress_bar(len(paths), progress)
    try:
        if scheduler:
            outcomes = _run_on_cluster(paths, args, scheduler, bar.update, analyse_workbook_bytes)
        else:
            outcomes = _run_local(paths, args, workers or os.cpu_count() or 1, bar.update, analyse_workbook_file)
    finally:
        bar.close()
    rows = []
    for path in paths:
        outcome = outcomes[path.name]
        if outcome.result_bytes is not None:
            atomic_write(out / outcome.result_name, lambda name, data=outcome.result_bytes: Path(name).write_bytes(data))
        rows += outcome.rows
    xlsx, csv_path = write_batch_summary(rows, out)
    refused = [p.name for p in paths if not outcomes[p.name].done]
    crashed = [p.name for p in paths if outcomes[p.name].rows[0]["status"].startswith("internal error")]
    return BatchReport(rows, xlsx, csv_path, refused, crashed)


class _NoBar:
    def update(self, n: int = 1) -> None:
        pass

    def close(self) -> None:
        pass


def _progress_bar(total: int, show: bool):
    if not show:
        return _NoBar()
    from tqdm import tqdm

    return tqdm(total=total, unit="file", file=sys.stderr, desc="workbooks")


# ---------------------------------------------------------------- command line

def add_batch_parser(commands) -> None:
    """Add ``batch`` to the command line's subcommands."""
    from workbook_tools.cli import _add_analysis_options

    batch = commands.add_parser("batch", help="analyse every workbook in a folder and write a summary")
    batch.add_argument("in_dir", type=Path, help="folder of input workbooks (.xlsx, .xlsm); they are not changed")
    _add_analysis_options(batch, output=False)
    run = batch.add_argument_group("the batch")
    run.add_argument("--out", dest="out_dir", type=Path, required=True,
                     help="folder for the result workbooks and batch-summary.xlsx / .csv (created when missing)")
    run.add_argument("--prefix", default="wbt-", help="name prefix of the result sheets (default wbt-)")
    run.add_argument("--best", choices=BEST_CHOICES, default="highest",
                     help="the summary's best treatment: highest (default) or lowest adjusted mean")
    run.add_argument("--workers", type=int, help="local worker processes (default: the machine's cores)")
    run.add_argument("--scheduler", help="run on a Dask distributed cluster at tcp://HOST:PORT instead")
    run.add_argument("--no-progress", action="store_true", help="no progress bar (shown only on a terminal)")


def run_batch_command(args, say) -> int:
    """``workbook-tools batch``: 0 every file done, 2 some refused, 1 a worker failed internally."""
    from workbook_tools.cli import EXIT_INPUT, EXIT_INTERNAL, EXIT_OK, _options
    from workbook_tools.sheets.limits import limits_from_options

    if args.workers is not None and args.workers < 1:
        from workbook_tools.analysis.errors import TrialInputError

        raise TrialInputError("--workers must be at least 1.")
    report = run_batch(args.in_dir, args.out_dir, args.range_text, workers=args.workers, scheduler=args.scheduler,
                       prefix=args.prefix, best=args.best, limits=limits_from_options(args),
                       progress=not args.no_progress and sys.stderr.isatty(), **_options(args))
    n_files = len({row["file"] for row in report.rows})
    say(f"Analysed {n_files - len(report.refused)} of {n_files} workbook(s); summary: {report.summary_xlsx} "
        f"and {report.summary_csv}")
    for row in report.rows:
        if row["status"] != "done":
            say(f"  {row['file']}: {row['status']}")
    if report.crashed:
        return EXIT_INTERNAL
    return EXIT_INPUT if report.refused else EXIT_OK
