"""``exomap serve``: run the web service (JSON API, API docs, pages) with uvicorn.

Options override the ``EXOMAP_*`` environment settings (``exomap.web.settings.Settings``); the server listens
on the loopback address unless told otherwise.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``serve`` sub-command to the ``exomap`` parser."""
    parser = subparsers.add_parser(
        "serve",
        help="run the web service (JSON API and pages)",
        description="Run the exomap web service: the JSON API under /api/v1, its docs at /api/docs, and the pages.",
    )
    parser.add_argument("--host", default=None, help="address to listen on (default 127.0.0.1, or EXOMAP_HOST)")
    parser.add_argument("--port", type=int, default=None, help="TCP port (default 8000, or EXOMAP_PORT)")
    parser.add_argument(
        "--data-dir", type=Path, default=None, help="folder of the scenario store (default ./data, or EXOMAP_DATA_DIR)"
    )
    parser.add_argument("--workers", type=int, default=None, help="computations run at once (default 2)")
    parser.add_argument(
        "--log-level",
        default="info",
        choices=["critical", "error", "warning", "info", "debug"],
        help="server log level (default info)",
    )
    parser.set_defaults(run=run)
    return parser


def settings_from_args(args: argparse.Namespace):  # noqa: ANN201 - Settings, imported lazily
    """Settings from the environment with the command-line options laid over them."""
    from exomap.web.settings import Settings

    overrides = {
        key: value
        for key, value in (
            ("host", args.host),
            ("port", args.port),
            ("data_dir", args.data_dir),
            ("workers", getattr(args, "workers", None)),
        )
        if value is not None
    }
    return Settings(**overrides)


def _setting_errors(exc: Exception) -> list[str]:
    """One line per bad setting, naming its environment variable (and option), without a traceback."""
    from pydantic import ValidationError

    if not isinstance(exc, ValidationError):  # pydantic-settings' SettingsError: a value it could not decode
        return [f"exomap serve: {exc}"]
    lines = []
    for err in exc.errors():
        name = ".".join(str(p) for p in err["loc"]) or "settings"
        message = str(err["msg"]).removeprefix("Value error, ")
        lines.append(f"exomap serve: EXOMAP_{name.upper()} / {name}: {message}")
    return lines


def run(args: argparse.Namespace) -> int:
    """Run the server until interrupted; return the exit status."""
    import uvicorn
    from pydantic import ValidationError
    from pydantic_settings import SettingsError

    from exomap.web.app import create_app
    from exomap.web.middleware import allowed_hosts
    from exomap.web.protocol import uvicorn_options
    from exomap.web.store import StoreUnavailableError

    try:
        settings = settings_from_args(args)
    except (ValidationError, SettingsError) as exc:
        for line in _setting_errors(exc):
            print(line, file=sys.stderr)
        return 2
    try:
        app = create_app(settings, warm_up=True)
    except StoreUnavailableError as exc:
        print(f"exomap serve: {exc}", file=sys.stderr)
        return 2
    print(
        f"exomap: serving on http://{settings.host}:{settings.port}/ (API docs at /api/docs); "
        f"scenario store {app.state.store.database.where}"
    )
    hosts = allowed_hosts(settings.allowed_hosts, settings.host)
    names = "any" if hosts is None else ", ".join(sorted(hosts))
    print(f"exomap: answering the host names {names} (EXOMAP_ALLOWED_HOSTS sets them)")
    # exomap's own h11 protocol: header timeout, 414 for long URLs, 431 for large heads (exomap.web.protocol)
    uvicorn.run(app, log_level=args.log_level, **uvicorn_options(settings))
    return 0
