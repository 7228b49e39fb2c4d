"""The upload page in a real browser: Debian's chromium, headless, driven by playwright.

Playwright only drives the system browser (``/usr/bin/chromium``); it downloads
nothing. The reference for the treatment test is statsmodels ``anova_lm``.
"""

from __future__ import annotations

import json
import shutil

import openpyxl
import pytest

playwright_api = pytest.importorskip("playwright.sync_api")
pytest.importorskip("fastapi")

from tests.live_service import serve_command, statsmodels_treatment_p  # noqa: E402
from workbook_tools.samples import SAMPLES, build_sample  # noqa: E402

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="Debian chromium is not installed "
                                                         "(apt-get install chromium; .ci/run installs it)")
# A closed network: nothing in the background may try to reach the internet.
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync"]
GRID = SAMPLES[0]


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("browser")


@pytest.fixture(scope="module")
def page(folder):
    with serve_command(folder) as (url, _), playwright_api.sync_playwright() as driver:
        context = driver.chromium.launch_persistent_context(
            str(folder / "profile"), executable_path=CHROMIUM, headless=True, args=CHROMIUM_FLAGS,
            accept_downloads=True)
        try:
            tab = context.new_page()
            tab.goto(url + "/")
            yield tab
        finally:
            context.close()


def _fill(page, book, answer_as):
    page.set_input_files("#file", str(book))
    page.fill("#range", GRID.range)
    page.select_option("#compare", "tukey")
    page.select_option("#format", answer_as)


def test_page_shows_the_json_with_the_treatment_p_value(page, folder):
    book = build_sample(GRID, folder / "books")
    _fill(page, book, "json")
    page.click("#submit")
    page.wait_for_selector("#result:not([hidden])", timeout=60_000)
    shown = json.loads(page.inner_text("#result"))
    page.screenshot(path=str(folder / "upload-page-json.png"), full_page=True)
    treatment = next(r for r in shown["anova"] if r["source"] == "treatment")
    f, p = statsmodels_treatment_p(book, GRID.sheet, "B3:G9")
    assert treatment["f"] == pytest.approx(f, rel=1e-9)
    assert treatment["p"] == pytest.approx(p, rel=1e-7)
    assert (folder / "upload-page-json.png").stat().st_size > 0


def test_page_downloads_the_result_workbook(page, folder):
    book = build_sample(GRID, folder / "books")
    _fill(page, book, "xlsx")
    with page.expect_download(timeout=60_000) as download:
        page.click("#submit")
    target = folder / "downloaded.xlsx"
    download.value.save_as(str(target))
    assert download.value.suggested_filename == "coating_hardness-analysed.xlsx"
    result = openpyxl.load_workbook(target)
    assert "wbt-anova" in result.sheetnames


def test_page_shows_a_refusal_in_words(page, folder):
    book = build_sample(GRID, folder / "books")
    _fill(page, book, "json")
    page.fill("#range", "Nowhere!A1:C3")
    page.click("#submit")
    page.wait_for_selector("#error:not([hidden])", timeout=60_000)
    text = page.inner_text("#error")
    page.screenshot(path=str(folder / "upload-page-refused.png"), full_page=True)
    assert text.startswith("Refused (422)") and "no sheet named 'Nowhere'" in text
