"""The upload service: ``workbook-tools serve``.

Only the command-line glue lives here; :mod:`workbook_tools.service.app`
(FastAPI, uvicorn) is imported when the service starts.
"""

from __future__ import annotations

from pathlib import Path


def add_serve_parser(commands) -> None:
    """Add ``serve`` to the command line's subcommands."""
    serve = commands.add_parser("serve", help="run the HTTP upload service and its upload page")
    serve.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    serve.add_argument("--port", type=int, default=8000, help="port (default 8000)")
    serve.add_argument("--keep-uploads", type=Path, metavar="DIR",
                       help="keep every upload and its result in DIR (default: nothing is kept)")
    serve.add_argument("--max-upload-mb", type=float, default=20.0, help="largest upload accepted (default 20 MB)")
    serve.add_argument("--max-unzipped-mb", type=float, default=200.0,
                       help="largest total decompressed size of an upload's zip package (default 200 MB)")
    serve.add_argument("--max-cells", type=int, default=1_000_000,
                       help="most cells stored in an uploaded workbook and in the range (default 1,000,000)")
    serve.add_argument("--max-seconds", type=float, default=60.0,
                       help="seconds an analysis may take before the request is answered 408 (default 60)")


def run_serve(args, say) -> int:
    """Start uvicorn with the service until interrupted."""
    from workbook_tools.analysis.errors import TrialInputError

    try:
        import uvicorn

        from workbook_tools.service.app import ServiceSettings, create_app
    except ImportError:
        raise TrialInputError("serve needs the service extra: pip install 'workbook-tools[service]'.") from None
    if min(args.max_upload_mb, args.max_unzipped_mb, args.max_cells, args.max_seconds) <= 0:
        raise TrialInputError("Every limit of serve must be positive.")
    mb = 1024 * 1024
    settings = ServiceSettings(max_upload_bytes=int(args.max_upload_mb * mb),
                               max_unzipped_bytes=int(args.max_unzipped_mb * mb), max_cells=args.max_cells,
                               time_limit_seconds=args.max_seconds, keep_uploads=args.keep_uploads)
    say(f"Upload page: http://{args.host}:{args.port}/  (API schema at /openapi.json; Ctrl+C stops)")
    uvicorn.run(create_app(settings), host=args.host, port=args.port, log_level="info")
    return 0
