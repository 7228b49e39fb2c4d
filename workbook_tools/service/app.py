"""HTTP API for uploaded workbooks: ``POST /analyze``, ``GET /health``, the upload page at ``/``.

Every upload is written to a fresh temporary folder that is removed before the
response is sent (unless ``keep_uploads`` names a folder to copy it to).
Problems with the input are answered 4xx, never 500: 413 for an upload over a
size limit (file, decompressed size, cells, ...), 422 for anything the
analysis refuses (the message names the sheet and cell), 408 when the
analysis runs over the time limit.

The body size is checked while it arrives; the workbook limits of
:mod:`workbook_tools.sheets.limits` are applied to the read; the whole
analysis is bounded by ``time_limit_seconds`` from outside the worker thread.
"""

from __future__ import annotations

import datetime as dt
import re
import shutil
import tempfile
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, Optional, Union

import anyio
from fastapi import FastAPI, File, Form, HTTPException, UploadFile
from fastapi.responses import HTMLResponse, JSONResponse, Response
from pydantic import BaseModel

from workbook_tools import __version__
from workbook_tools.analysis.errors import TrialInputError
from workbook_tools.cli import COMPARE_METHODS, DEFAULT_COMPARE as DEFAULT_METHOD
from workbook_tools.sheets import limits as workbook_limits

XLSX_MEDIA_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
XLSM_MEDIA_TYPE = "application/vnd.ms-excel.sheet.macroEnabled.12"
FORM_OVERHEAD_BYTES = 256 * 1024   # room for the form fields and multipart boundaries around the file
PAGE = Path(__file__).with_name("page.html")
_SAFE_NAME = re.compile(r"[^A-Za-z0-9 ._()+-]")

Compare = Literal[COMPARE_METHODS]  # type: ignore[valid-type]


@dataclass(frozen=True)
class ServiceSettings:
    """Limits and storage of the upload service."""

    max_upload_bytes: int = 20 * 1024 * 1024
    max_unzipped_bytes: int = 200 * 1024 * 1024
    max_cells: int = 1_000_000
    time_limit_seconds: float = 60.0
    max_concurrent_analyses: int = 4
    keep_uploads: Optional[Path] = None

    def workbook_limits(self) -> workbook_limits.Limits:
        """The reader's limits for one upload (other fields keep the reader's defaults)."""
        return workbook_limits.Limits(max_file_bytes=self.max_upload_bytes,
                                      max_uncompressed_bytes=self.max_unzipped_bytes,
                                      max_cells=self.max_cells, seconds=self.time_limit_seconds)


class Problem(BaseModel):
    """Body of every 4xx answer: a message (or the list of invalid form fields)."""

    detail: Union[str, list[Any]]


class Health(BaseModel):
    status: str
    version: str


class BodyLimit:
    """ASGI middleware: answer 413 as soon as a request body grows over ``limit`` bytes."""

    def __init__(self, app, limit: int):
        self.app, self.limit = app, limit

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        length = dict(scope.get("headers") or []).get(b"content-length")
        if length is not None and length.isdigit() and int(length) > self.limit:
            return await _send_413(send, self.limit)
        received = 0

        async def limited_receive():
            nonlocal received
            message = await receive()
            received += len(message.get("body", b""))
            if received > self.limit:
                raise HTTPException(413, _too_large(self.limit))
            return message

        return await self.app(scope, limited_receive, send)


def _too_large(limit: int) -> str:
    return f"The upload is larger than the service accepts ({limit / 1024 / 1024:.1f} MB)."


async def _send_413(send, limit: int) -> None:
    body = Problem(detail=_too_large(limit)).model_dump_json().encode()
    await send({"type": "http.response.start", "status": 413,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode())]})
    await send({"type": "http.response.body", "body": body})


def safe_file_name(name: Optional[str]) -> str:
    """The upload's base name with only plain characters (never a path); ``upload.xlsx`` when empty."""
    base = _SAFE_NAME.sub("_", Path((name or "").replace("\\", "/")).name).strip(" .")
    return base[:120] or "upload.xlsx"


def status_for(error: TrialInputError) -> int:
    """408 for the reader's time limit, 413 for its other limits, 422 for every other input problem.

    A limit's message ends with the hint ``(limit --option N; ...)`` naming the
    limit's command-line option (:data:`workbook_tools.sheets.limits.OPTIONS`).
    """
    for field, (option, _, _) in workbook_limits.OPTIONS.items():
        if f"(limit {option} " in error.message:
            return 408 if field == "seconds" else 413
    return 422


def _keep(settings: ServiceSettings, folder: Path) -> None:
    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    target = Path(settings.keep_uploads) / f"{stamp}-{uuid.uuid4().hex[:8]}"
    shutil.copytree(folder, target)


def _analyse(data: bytes, name: str, range_text: str, options: dict, want: str, settings: ServiceSettings):
    """Runs in a worker thread: write the upload, analyse, return JSON data or workbook bytes."""
    from workbook_tools.sheets.book import analyses_json, analyse_book, write_analyses
    from workbook_tools.sheets.safety import default_output_path

    with tempfile.TemporaryDirectory(prefix="wbt-upload-") as tmp:
        source = Path(tmp) / name
        source.write_bytes(data)
        try:
            with workbook_limits.applied(settings.workbook_limits()):
                analyses = analyse_book(source, range_text, **options)
            if want == "json":
                return analyses_json(analyses), None
            result = write_analyses(source, analyses, out=Path(tmp) / default_output_path(source).name,
                                    run_options={"range": range_text, **options})
            return result.read_bytes(), result.name
        finally:
            if settings.keep_uploads is not None:
                _keep(settings, Path(tmp))


def create_app(settings: ServiceSettings = ServiceSettings()) -> FastAPI:
    """The service as an ASGI application (run it with uvicorn)."""
    app = FastAPI(title="workbook-tools upload service", version=__version__,
                  description="Randomised complete block analysis of an uploaded workbook range.")
    app.add_middleware(BodyLimit, limit=settings.max_upload_bytes + FORM_OVERHEAD_BYTES)
    limiter = anyio.CapacityLimiter(settings.max_concurrent_analyses)
    problems = {413: {"model": Problem, "description": "Upload too large"},
                422: {"model": Problem, "description": "The workbook or the options were refused"},
                408: {"model": Problem, "description": "The analysis ran over the time limit"}}
    result_content = {"application/json": {"schema": {"type": "object"}},
                      XLSX_MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}},
                      XLSM_MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}}}

    @app.get("/", response_class=HTMLResponse, include_in_schema=False)
    def page() -> HTMLResponse:
        return HTMLResponse(PAGE.read_text(encoding="utf-8"))

    @app.get("/health", response_model=Health)
    def health() -> Health:
        return Health(status="ok", version=__version__)

    @app.post("/analyze", responses={200: {"content": result_content,
                                           "description": "The results as JSON or the result workbook"},
                                     **problems})
    async def analyze(
        file: UploadFile = File(..., description="the workbook (.xlsx or .xlsm)"),
        range_text: str = Form(..., alias="range", description="'Sheet'!B3:G9, a defined name or a table name"),
        layout: Literal["auto", "wide", "long"] = Form("auto"),
        transposed: bool = Form(False),
        block: Optional[str] = Form(None),
        treatment: Optional[str] = Form(None),
        response: Optional[list[str]] = Form(None, description="long layout: a response column (repeat)"),
        text_numbers: bool = Form(False),
        errors_as_missing: bool = Form(False),
        alpha: float = Form(0.05, gt=0, lt=1),
        compare: Compare = Form(DEFAULT_METHOD),
        control: Optional[str] = Form(None),
        alternative: Literal["two-sided", "greater", "less"] = Form("two-sided"),
        block_model: Literal["random", "fixed"] = Form("random"),
        format: Literal["json", "xlsx"] = Form("json"),
    ):
        data = await file.read()
        if len(data) > settings.max_upload_bytes:
            raise HTTPException(413, _too_large(settings.max_upload_bytes))
        options = {"layout": layout, "transposed": transposed or None, "block": block or None,
                   "treatment": treatment or None, "responses": [r for r in response or [] if r] or None,
                   "text_numbers": text_numbers or None, "errors_as_missing": errors_as_missing or None,
                   "alpha": alpha, "compare": compare, "control": control or None, "alternative": alternative,
                   "block_model": block_model}
        name = safe_file_name(file.filename)
        try:
            with anyio.fail_after(settings.time_limit_seconds):
                content, result_name = await anyio.to_thread.run_sync(
                    _analyse, data, name, range_text, options, format, settings,
                    abandon_on_cancel=True, limiter=limiter)
        except TrialInputError as error:
            return JSONResponse({"detail": str(error)}, status_code=status_for(error))
        except TimeoutError:
            return JSONResponse({"detail": f"The analysis took longer than the service allows "
                                           f"({settings.time_limit_seconds:g} s)."}, status_code=408)
        if result_name is None:
            return JSONResponse(content)
        media = XLSM_MEDIA_TYPE if result_name.lower().endswith(".xlsm") else XLSX_MEDIA_TYPE
        return Response(content, media_type=media,
                        headers={"Content-Disposition": f'attachment; filename="{result_name}"'})

    return app
