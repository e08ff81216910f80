"""``lti-audit serve``: run the audit service (FastAPI on uvicorn).

The database schema is migrated at start-up. See docs/service.md for running the service
for a team, creating tokens and backing up the database.
"""

from __future__ import annotations

import argparse

NAME = "serve"
HELP = "run the audit HTTP service with stored audit history"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--host", default="127.0.0.1",
                        help="interface to listen on (default 127.0.0.1; use a reverse proxy "
                             "with TLS to expose the service)")
    parser.add_argument("--port", type=int, default=8765, help="TCP port (default 8765)")
    parser.add_argument("--database", metavar="URL", default=None,
                        help="SQLAlchemy database URL (default: sqlite file lti-audit.sqlite3 "
                             "in the current directory)")
    parser.add_argument("--max-body-bytes", type=int, default=None,
                        help="largest request body accepted (default 2 MiB)")
    parser.add_argument("--max-order", type=int, default=None,
                        help="largest model order accepted (default 200)")


def run(args: argparse.Namespace) -> int:
    import uvicorn

    from ..service.app import DEFAULT_MAX_BODY_BYTES, DEFAULT_MAX_ORDER, create_app
    from ..service.db import default_database_url

    if not 0 < args.port < 65536:
        from ..errors import InvalidModelError

        raise InvalidModelError(f"--port: got {args.port}, expected 1..65535", field="port")
    app = create_app(
        args.database or default_database_url(),
        max_body_bytes=args.max_body_bytes or DEFAULT_MAX_BODY_BYTES,
        max_order=args.max_order or DEFAULT_MAX_ORDER,
    )
    uvicorn.run(app, host=args.host, port=args.port, log_level="info")
    return 0
