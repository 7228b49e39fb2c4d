"""Helpers for the service tests: a real uvicorn server on 127.0.0.1, and reference values.

``serve_command`` starts ``workbook-tools serve`` as a separate process (the
way a user runs it); ``serve_in_thread`` runs the same application in a thread
with settings the command line does not expose to tests cheaply (tiny limits).
"""

from __future__ import annotations

import contextlib
import os
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import openpyxl

WAIT_SECONDS = 60.0   # how long a server may take to come up on a busy machine


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def wait_until_healthy(url: str, process: subprocess.Popen | None = None) -> None:
    deadline = time.monotonic() + WAIT_SECONDS
    while time.monotonic() < deadline:
        if process is not None and process.poll() is not None:
            raise RuntimeError(f"the server stopped: {process.stderr.read().decode(errors='replace')}")
        try:
            if httpx.get(f"{url}/health", timeout=2).status_code == 200:
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.2)
    raise RuntimeError(f"no answer from {url} within {WAIT_SECONDS} s")


@contextlib.contextmanager
def serve_command(tmp_dir: Path, *extra: str):
    """``python -m workbook_tools.cli serve`` on a free port; TMPDIR points into ``tmp_dir``."""
    port = free_port()
    temp = tmp_dir / "server-tmp"
    temp.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ, TMPDIR=str(temp))
    process = subprocess.Popen([sys.executable, "-m", "workbook_tools.cli", "serve", "--host", "127.0.0.1",
                                "--port", str(port), *extra], env=env,
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    url = f"http://127.0.0.1:{port}"
    try:
        wait_until_healthy(url, process)
        yield url, temp
    finally:
        process.terminate()
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


@contextlib.contextmanager
def serve_in_thread(settings):
    """The service application in a uvicorn thread on a free port."""
    import uvicorn

    from workbook_tools.service.app import create_app

    port = free_port()
    server = uvicorn.Server(uvicorn.Config(create_app(settings), host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    url = f"http://127.0.0.1:{port}"
    try:
        wait_until_healthy(url)
        yield url
    finally:
        server.should_exit = True
        thread.join(timeout=20)


def statsmodels_treatment_p(path, sheet: str, cells: str) -> tuple[float, float]:
    """Treatment F and p of a wide grid (treatments across, blocks down) from statsmodels ``anova_lm``.

    The reference: an additive two-way OLS fit ``y ~ C(treatment) + C(block)``
    with type II sums of squares, independent of the code under test.
    """
    import pandas as pd
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    ws = openpyxl.load_workbook(path, data_only=True)[sheet]
    grid = [[c.value for c in row] for row in ws[cells]]
    treatments = grid[0][1:]
    records = [(row[0], t, v) for row in grid[1:] for t, v in zip(treatments, row[1:]) if v is not None]
    frame = pd.DataFrame(records, columns=["block", "treatment", "y"]).astype({"block": str, "treatment": str})
    table = anova_lm(smf.ols("y ~ C(treatment) + C(block)", data=frame).fit(), typ=2)
    return float(table.loc["C(treatment)", "F"]), float(table.loc["C(treatment)", "PR(>F)"])
