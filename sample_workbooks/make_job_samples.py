"""Write the job-sheet samples: ``python sample_workbooks/make_job_samples.py [--macro]``.

Only these files are written; the other samples (``make_samples.py``) are left as
they are. ``--macro`` also makes ``job_sheet_runner.xlsm`` (and its ``.py``) from the
workbook that ``xlwings quickstart --standalone`` creates (xlwings must be installed).
"""

import subprocess
import sys
import tempfile
from pathlib import Path

from workbook_tools.samples import build_job_sample, build_macro_sample

HERE = Path(__file__).resolve().parent

if __name__ == "__main__":
    print(build_job_sample(HERE).name)
    if "--macro" in sys.argv[1:]:
        with tempfile.TemporaryDirectory() as scratch:
            subprocess.run([sys.executable, "-m", "xlwings.cli", "quickstart", "job_sheet_runner", "--standalone"],
                           cwd=scratch, check=True, capture_output=True)
            print(build_macro_sample(HERE, Path(scratch) / "job_sheet_runner" / "job_sheet_runner.xlsm").name)
