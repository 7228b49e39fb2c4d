"""The upload service against a real server on 127.0.0.1 with a real HTTP client.

The server runs as ``workbook-tools serve`` in its own process; a few limit
tests use the same application in a uvicorn thread with tiny limits.
Reference values: statsmodels ``anova_lm`` (type II) on the sample grid.
"""

from __future__ import annotations

import io
import statistics
from concurrent.futures import ThreadPoolExecutor

import openpyxl
import pytest

httpx = pytest.importorskip("httpx")
pytest.importorskip("fastapi")
pytest.importorskip("uvicorn")

from tests.live_service import serve_command, serve_in_thread, statsmodels_treatment_p  # noqa: E402
from workbook_tools.samples import SAMPLES, build_sample  # noqa: E402
from workbook_tools.service.app import XLSX_MEDIA_TYPE, ServiceSettings, safe_file_name  # noqa: E402

GRID = SAMPLES[0]            # wide grid, Hardness!B3:G9
LONG = SAMPLES[1]            # long layout, two responses, one lost plot


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("service")


@pytest.fixture(scope="module")
def server(folder):
    with serve_command(folder) as (url, server_tmp):
        yield url, server_tmp


@pytest.fixture(scope="module")
def grid_book(folder):
    return build_sample(GRID, folder / "books")


def _post(url, book, data, **kwargs):
    with open(book, "rb") as handle:
        return httpx.post(f"{url}/analyze", files={"file": (book.name, handle.read())}, data=data,
                          timeout=60, **kwargs)


def test_health_and_page(server):
    url, _ = server
    health = httpx.get(f"{url}/health").json()
    assert health["status"] == "ok" and health["version"]
    page = httpx.get(url + "/")
    assert page.status_code == 200 and "text/html" in page.headers["content-type"]
    assert '<form id="upload">' in page.text


def test_openapi_schema_lists_every_form_field(server):
    url, _ = server
    schema = httpx.get(f"{url}/openapi.json").json()
    operation = schema["paths"]["/analyze"]["post"]
    ref = operation["requestBody"]["content"]["multipart/form-data"]["schema"]["$ref"].split("/")[-1]
    fields = set(schema["components"]["schemas"][ref]["properties"])
    assert {"file", "range", "layout", "block", "treatment", "response", "alpha", "compare", "control",
            "alternative", "block_model", "format"} <= fields
    assert {"200", "408", "413", "422"} <= set(operation["responses"])


def test_json_answer_matches_statsmodels(server, grid_book):
    url, _ = server
    answer = _post(url, grid_book, {"range": GRID.range, "compare": "tukey"})
    assert answer.status_code == 200, answer.text
    result = answer.json()
    treatment = next(r for r in result["anova"] if r["source"] == "treatment")
    f, p = statsmodels_treatment_p(grid_book, GRID.sheet, "B3:G9")
    assert treatment["f"] == pytest.approx(f, rel=1e-9)
    assert treatment["p"] == pytest.approx(p, rel=1e-7)
    assert result["source"]["file"] == grid_book.name


def test_workbook_answer_is_a_result_workbook(server, grid_book):
    url, _ = server
    answer = _post(url, grid_book, {"range": GRID.range, "format": "xlsx"})
    assert answer.status_code == 200, answer.text
    assert answer.headers["content-type"] == XLSX_MEDIA_TYPE
    assert 'filename="coating_hardness-analysed.xlsx"' in answer.headers["content-disposition"]
    book = openpyxl.load_workbook(io.BytesIO(answer.content))
    assert {"Hardness", "wbt-anova", "wbt-means", "wbt-audit"} <= set(book.sheetnames)


def test_long_layout_with_repeated_response_fields(server, folder):
    url, _ = server
    book = build_sample(LONG, folder / "books")
    data = {"range": LONG.range, "layout": "long", "block": LONG.block, "treatment": LONG.treatment,
            "response": list(LONG.responses)}
    answer = _post(url, book, data)
    assert answer.status_code == 200, answer.text
    assert [r["source"]["response"] for r in answer.json()["results"]] == list(LONG.responses)


@pytest.mark.parametrize("upload, data, words", [
    (b"block,treatment,value\n1,A,2\n", {"range": "A1:C2"}, "not a workbook"),
    (None, {"range": "Nowhere!A1:C4"}, "no sheet named 'Nowhere'"),
    (None, {"range": GRID.range, "compare": "dunnett", "control": "No such coating"}, "No such coating"),
])
def test_input_problems_are_422_with_the_message(server, grid_book, upload, data, words):
    url, _ = server
    content = grid_book.read_bytes() if upload is None else upload
    answer = httpx.post(f"{url}/analyze", files={"file": ("trial.xlsx", content)}, data=data, timeout=60)
    assert answer.status_code == 422
    assert words in answer.json()["detail"]


@pytest.mark.parametrize("data", [{"range": GRID.range, "compare": "scheffe"}, {"range": GRID.range, "alpha": "2"},
                                  {}])
def test_invalid_options_are_422(server, grid_book, data):
    url, _ = server
    assert _post(url, grid_book, data).status_code == 422


def test_uploads_are_not_kept(server, grid_book):
    url, server_tmp = server
    assert _post(url, grid_book, {"range": GRID.range, "format": "xlsx"}).status_code == 200
    assert _post(url, grid_book, {"range": "Nowhere!A1:B2"}).status_code == 422
    assert not list(server_tmp.glob("wbt-upload-*"))


def test_too_large_upload_is_413(grid_book):
    with serve_in_thread(ServiceSettings(max_upload_bytes=1024)) as url:
        answer = _post(url, grid_book, {"range": GRID.range})
        assert answer.status_code == 413
        assert "larger than the service accepts" in answer.json()["detail"]
        # a body far over the limit is refused from its Content-Length, before it is read
        huge = httpx.post(f"{url}/analyze", files={"file": ("big.xlsx", b"0" * 2_000_000)},
                          data={"range": "A1:B2"}, timeout=60)
        assert huge.status_code == 413


@pytest.mark.parametrize("settings, words", [
    (ServiceSettings(max_unzipped_bytes=4096), "unpacks to"),
    (ServiceSettings(max_cells=20), "cells, more than"),
])
def test_workbook_limits_are_413_naming_the_limit(grid_book, settings, words):
    with serve_in_thread(settings) as url:
        answer = _post(url, grid_book, {"range": GRID.range})
        assert answer.status_code == 413
        assert words in answer.json()["detail"]


def test_time_limit_is_408(grid_book):
    with serve_in_thread(ServiceSettings(time_limit_seconds=1e-6)) as url:
        answer = _post(url, grid_book, {"range": GRID.range})
        assert answer.status_code == 408
        assert "longer than" in answer.json()["detail"]


def test_keep_uploads_keeps_upload_and_result(grid_book, tmp_path):
    with serve_in_thread(ServiceSettings(keep_uploads=tmp_path)) as url:
        assert _post(url, grid_book, {"range": GRID.range, "format": "xlsx"}).status_code == 200
    (kept,) = list(tmp_path.iterdir())
    assert {p.name for p in kept.iterdir()} == {"coating_hardness.xlsx", "coating_hardness-analysed.xlsx"}


@pytest.mark.parametrize("name, safe", [("../../etc/passwd", "passwd"), ("C:\\Users\\a\\trial.xlsx", "trial.xlsx"),
                                        ("", "upload.xlsx"), ("we<ek>1.xlsx", "we_ek_1.xlsx")])
def test_upload_names_never_leave_the_folder(name, safe):
    assert safe_file_name(name) == safe


def test_load_300_requests_8_at_a_time(server, grid_book):
    """Bounded load: every answer is 200; latency percentiles are printed, not asserted."""
    url, _ = server
    content = grid_book.read_bytes()
    import time

    with httpx.Client(base_url=url, timeout=60, limits=httpx.Limits(max_connections=8)) as client:
        def one(_):
            start = time.perf_counter()
            answer = client.post("/analyze", files={"file": (grid_book.name, content)}, data={"range": GRID.range})
            return answer.status_code, time.perf_counter() - start

        started = time.perf_counter()
        with ThreadPoolExecutor(max_workers=8) as pool:
            results = list(pool.map(one, range(300)))
        total = time.perf_counter() - started
    statuses = [status for status, _ in results]
    assert statuses.count(200) == 300, {s: statuses.count(s) for s in set(statuses)}
    cuts = statistics.quantiles([seconds for _, seconds in results], n=100)
    print(f"\nload test: 300 requests, 8 at a time, {total:.1f} s in all; latency p50 {cuts[49] * 1000:.0f} ms, "
          f"p90 {cuts[89] * 1000:.0f} ms, p99 {cuts[98] * 1000:.0f} ms")
