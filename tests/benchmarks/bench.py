"""Speed benchmark: every figure is a ratio against a baseline measured in the same run.

Run from the repository root: ``python tests/benchmarks/bench.py [--quick]``.
Needs the test extra (``pip install -e '.[test]'``); python-calamine is a dependency.
Not part of the test run; results are recorded in DEVELOPERS.md.

Targets (issue "Speed"):
1. typical full analysis (10 x 5, Tukey) at least 50x faster than the reference-library route;
2. 10,000 x 50 full analysis at most 50x the bare closed-form sums; growth from 1,000 x 20 at
   most 1.5x the growth in cells;
3. 1,000 x 20 with missing cells at most 50x the bare closed-form sums of the balanced table;
4. small workbook end to end (warm) at most 3x a bare openpyxl load + save;
5. 100,000-row long sheet read in at most 2x the time and 2x the peak memory of python-calamine;
6. cold command line at most 1.5x ``python -c "import numpy, scipy.stats, openpyxl"``.
"""

from __future__ import annotations

import argparse
import gc
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))


def median_seconds(fn, repeats: int, warmup: int = 1) -> float:
    for _ in range(warmup):
        fn()
    times = []
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def trial(b: int, t: int, seed: int = 1, missing: int = 0):
    rng = np.random.default_rng(seed)
    grid = 50 + rng.normal(0, 2, (b, 1)) + rng.normal(0, 1, (1, t)) + rng.normal(0, 1, (b, t))
    if missing:
        rows = rng.choice(np.arange(1, b), missing, replace=False)
        cols = rng.integers(0, t, missing)
        grid = grid.copy()
        grid[rows, cols] = np.nan
    return grid, [f"B{i + 1}" for i in range(b)], [f"T{j + 1}" for j in range(t)]


def bare_sums(grid: np.ndarray) -> float:
    """The closed-form two-way sums on a complete grid: the floor any analysis must pay."""
    grand = grid.mean()
    centred = grid - grand
    rows = centred.mean(axis=1)
    cols = centred.mean(axis=0)
    residual = centred - rows[:, None] - cols[None, :]
    return float((residual * residual).sum() + (rows @ rows) * grid.shape[1] + (cols @ cols) * grid.shape[0])


def full_analysis(grid, blocks, treatments):
    from workbook_tools.analysis.blocked import analyze_design
    from workbook_tools.analysis.design import design_from_grid

    return analyze_design(design_from_grid(grid, blocks, treatments), compare="tukey")


def reference_route(grid, blocks, treatments):
    """statsmodels formula OLS + anova_lm(typ=2); scipy's studentized range, Shapiro, Levene, Friedman."""
    import pandas as pd
    import statsmodels.formula.api as smf
    from scipy import stats
    from statsmodels.stats.anova import anova_lm

    b, t = grid.shape
    frame = pd.DataFrame({"y": grid.ravel(), "block": np.repeat(blocks, t), "trt": np.tile(treatments, b)})
    fit = smf.ols("y ~ C(trt) + C(block)", data=frame).fit()
    table = anova_lm(fit, typ=2)
    mse = table.loc["Residual", "sum_sq"] / table.loc["Residual", "df"]
    df = fit.df_resid
    stats.studentized_range.ppf(0.95, t, df)
    means = grid.mean(axis=0)
    se = np.sqrt(mse / b)
    for i in range(t):
        for j in range(i + 1, t):
            stats.studentized_range.sf(abs(means[i] - means[j]) / se, t, df)
    stats.shapiro(fit.resid)
    resid = fit.resid.values.reshape(b, t)
    stats.levene(*[resid[:, j] for j in range(t)], center="median")
    stats.friedmanchisquare(*[grid[:, j] for j in range(t)])


def ratio_line(name, ours, base, target, better="lower"):
    ratio = ours / base
    ok = ratio <= target if better == "lower" else (base / ours) >= target
    shown = ratio if better == "lower" else base / ours
    sign = "<=" if better == "lower" else ">="
    verdict = "met" if ok else "NOT met"
    print(f"{name:<58} ours {ours * 1e3:10.2f} ms  baseline {base * 1e3:10.2f} ms  "
          f"ratio {shown:8.2f} (target {sign} {target:g}) {verdict}")
    return ok


def bench_engine(quick: bool) -> list[bool]:
    results = []
    grid, blocks, treatments = trial(10, 5)
    from workbook_tools.analysis.compare import tukey_critical

    ours = median_seconds(lambda: full_analysis(grid, blocks, treatments), 30 if not quick else 10)
    base = median_seconds(lambda: reference_route(grid, blocks, treatments), 5 if not quick else 2)
    results.append(ratio_line("1. typical 10x5 full analysis: speed-up over reference", ours, base, 50,
                              better="higher"))

    def first_time():
        tukey_critical.cache_clear()  # as on a worksheet's first calculation with new alpha, k or df
        full_analysis(grid, blocks, treatments)

    cold = median_seconds(first_time, 30 if not quick else 10)
    ratio_line("   (for information) the same, Tukey critical value not yet memoised", cold, base, 50,
               better="higher")

    small = trial(1000, 20)
    large = trial(10000, 50)
    ours_small = median_seconds(lambda: full_analysis(*small), 5 if not quick else 2)
    ours_large = median_seconds(lambda: full_analysis(*large), 5 if not quick else 2)
    bare_large = median_seconds(lambda: bare_sums(large[0]), 20)
    results.append(ratio_line("2a. 10,000x50 full analysis / bare closed-form sums", ours_large, bare_large, 50))
    growth = (ours_large / ours_small) / ((10000 * 50) / (1000 * 20))
    print(f"{'2b. time growth 1,000x20 -> 10,000x50 / growth in cells':<58} {growth:8.2f} (target <= 1.5) "
          f"{'met' if growth <= 1.5 else 'NOT met'}")
    results.append(growth <= 1.5)

    holes = trial(1000, 20, missing=8)
    ours_missing = median_seconds(lambda: full_analysis(*holes), 5 if not quick else 2)
    bare_small = median_seconds(lambda: bare_sums(small[0]), 50)
    results.append(ratio_line("3. 1,000x20 with 8 missing cells / bare sums (balanced)", ours_missing,
                              bare_small, 50))
    return results


def small_workbook(folder: Path) -> Path:
    import openpyxl

    grid, blocks, treatments = trial(4, 5)
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = "Runs"
    ws.append(["Block", "Treatment", "Response"])
    for i, b in enumerate(blocks):
        for j, t in enumerate(treatments):
            ws.append([b, t, round(float(grid[i, j]), 3)])
    path = folder / "small.xlsx"
    book.save(path)
    return path


def bench_workbook(folder: Path, quick: bool) -> list[bool]:
    import openpyxl

    from workbook_tools.sheets.book import analyse_book, write_analyses

    path = small_workbook(folder)
    out = folder / "small-out.xlsx"

    def ours():
        analyses = analyse_book(path, "Runs!A1:C21", layout="long", block="Block", treatment="Treatment",
                                compare="tukey")
        write_analyses(path, analyses, out=out)

    def bare():
        openpyxl.load_workbook(path).save(folder / "bare.xlsx")

    t_ours = median_seconds(ours, 10 if not quick else 3)
    t_bare = median_seconds(bare, 10 if not quick else 3)
    return [ratio_line("4. small workbook end to end (warm) / openpyxl load+save", t_ours, t_bare, 3)]


LARGE_READ = """
import sys, time


def status(field):
    for line in open("/proc/self/status"):
        if line.startswith(field):
            return int(line.split()[1]) * 1024


which, path = sys.argv[1], sys.argv[2]
import python_calamine
if which == "ours":
    sys.path.insert(0, sys.argv[3])
    import numpy, openpyxl
    from workbook_tools.sheets import fast_grid, limits
    from workbook_tools.sheets.reader import read_trials
# reset the peak (VmHWM) to the present size, so only the read itself counts
open("/proc/self/clear_refs", "w").write("5")
start = status("VmRSS")
t0 = time.perf_counter()
if which == "calamine":
    workbook = python_calamine.CalamineWorkbook.from_path(path)
    rows = workbook.get_sheet_by_name("Runs").to_python()
else:
    tables = read_trials(path, "Runs!A1:C100001", layout="long", block="Block", treatment="Treatment")
elapsed = time.perf_counter() - t0
print(elapsed, status("VmHWM") - start)
"""


def large_sheet(folder: Path) -> Path:
    import openpyxl

    rng = np.random.default_rng(5)
    book = openpyxl.Workbook(write_only=True)
    ws = book.create_sheet("Runs")
    ws.append(["Block", "Treatment", "Response"])
    for i in range(100_000):
        ws.append([f"B{i // 20 + 1}", f"T{i % 20 + 1}", float(np.round(rng.normal(50, 2), 4))])
    path = folder / "large.xlsx"
    book.save(path)
    return path


def bench_large(folder: Path, quick: bool) -> list[bool]:
    path = large_sheet(folder)
    script = folder / "large_read.py"
    script.write_text(LARGE_READ)

    def measure(which):
        runs = []
        for _ in range(3 if not quick else 1):
            done = subprocess.run([sys.executable, str(script), which, str(path), str(ROOT)], check=True,
                                  capture_output=True, text=True)
            runs.append([float(x) for x in done.stdout.split()])
        return statistics.median(r[0] for r in runs), statistics.median(r[1] for r in runs)

    ours_t, ours_mem = measure("ours")
    base_t, base_mem = measure("calamine")
    ok_time = ratio_line("5a. 100,000-row long sheet read / python-calamine (time)", ours_t, base_t, 2)
    mem_ratio = ours_mem / max(base_mem, 1)
    ok_mem = mem_ratio <= 2
    print(f"{'5b. 100,000-row long sheet read / python-calamine (peak memory)':<58} ours {ours_mem / 2**20:8.1f} MiB"
          f"  baseline {base_mem / 2**20:8.1f} MiB  ratio {mem_ratio:8.2f} (target <= 2) "
          f"{'met' if ok_mem else 'NOT met'}")
    return [ok_time, ok_mem]


def bench_cold_cli(folder: Path, quick: bool) -> list[bool]:
    path = small_workbook(folder)
    command = [sys.executable, "-m", "workbook_tools.cli", "analyze", str(path), "--range", "Runs!A1:C21",
               "--layout", "long", "--block", "Block", "--treatment", "Treatment", "--out",
               str(folder / "cold-out.xlsx")]
    baseline = [sys.executable, "-c", "import numpy, scipy.stats, openpyxl"]

    def wall(cmd):
        def run():
            subprocess.run(cmd, check=True, capture_output=True, cwd=ROOT)
        return median_seconds(run, 5 if not quick else 2)

    return [ratio_line("6. cold command line / import numpy, scipy.stats, openpyxl", wall(command), wall(baseline),
                       1.5)]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats (rough figures)")
    parser.add_argument("--only", type=int, nargs="*", help="run only these target numbers")
    args = parser.parse_args(argv)
    chosen = set(args.only or [1, 2, 3, 4, 5, 6])
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if chosen & {1, 2, 3}:
            results += bench_engine(args.quick)
        if 4 in chosen:
            results += bench_workbook(folder, args.quick)
        if 5 in chosen:
            results += bench_large(folder, args.quick)
        if 6 in chosen:
            results += bench_cold_cli(folder, args.quick)
    print(json.dumps({"targets_met": sum(results), "targets_measured": len(results)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
