"""Write the sample workbooks into this folder: ``python sample_workbooks/make_samples.py``."""

from pathlib import Path

from workbook_tools.samples import build_all

if __name__ == "__main__":
    for path in build_all(Path(__file__).resolve().parent):
        print(path.name)
