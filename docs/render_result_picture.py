"""Render the README picture from real output: demo -> result workbook -> LibreOffice PDF -> PNG.

Run from the repository root with LibreOffice (soffice) and poppler (pdftoppm) installed:
``python docs/render_result_picture.py``. Writes docs/result-sheet.png.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
from pathlib import Path

import openpyxl
from PIL import Image, ImageChops

from workbook_tools.cli import main

SHEET = "wbt-anova"
OUT = Path(__file__).with_name("result-sheet.png")


def render() -> Path:
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        if main(["demo", "--folder", str(folder)]) != 0:
            sys.exit("demo failed")
        book = openpyxl.load_workbook(folder / "coating_hardness-analysed.xlsx")
        for name in book.sheetnames:
            if name != SHEET:
                del book[name]
        single = folder / "sheet.xlsx"
        book.save(single)
        subprocess.run(["soffice", f"-env:UserInstallation=file://{folder}/profile", "--headless", "--norestore",
                        "--convert-to", "pdf", "--outdir", str(folder), str(single)],
                       check=True, capture_output=True, timeout=180)
        subprocess.run(["pdftoppm", "-r", "110", "-png", "-f", "1", "-l", "1", str(folder / "sheet.pdf"),
                        str(folder / "page")], check=True, timeout=60)
        page = Image.open(next(folder.glob("page*.png"))).convert("RGB")
        background = Image.new("RGB", page.size, (255, 255, 255))
        box = ImageChops.difference(page, background).getbbox()
        margin = 20
        cropped = page.crop((max(box[0] - margin, 0), max(box[1] - margin, 0),
                             min(box[2] + margin, page.width), min(box[3] + margin, page.height)))
        cropped.save(OUT, optimize=True)
    return OUT


if __name__ == "__main__":
    print(render())
