"""``lti-audit serve``: run the audit service (FastAPI on uvicorn) and its audit jobs.

The database schema is migrated at start-up. Audits run as jobs on Dask distributed: by
default on a local cluster of worker processes started here, with ``--scheduler`` on an
existing Dask cluster. See docs/service.md for running the service for a team, creating
tokens, the job settings and backing up the database.
"""

from __future__ import annotations

import argparse
import os

from audit.commands._options import positive_number, whole_number

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
    parser.add_argument("--max-body-bytes", type=whole_number(1), default=None,
                        help="largest request body accepted (default 2 MiB)")
    parser.add_argument("--max-order", type=whole_number(1), default=None,
                        help="largest model order accepted, counted on the document before "
                             "conversion (default 200)")
    parser.add_argument("--max-channels", type=whole_number(1), default=None,
                        help="largest number of inputs or outputs of a model (default 64)")
    jobs = parser.add_argument_group("audit jobs (Dask distributed)")
    jobs.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                      default=os.environ.get("LTI_AUDIT_SCHEDULER") or None,
                      help="run the audits on this existing Dask scheduler (default: "
                           "$LTI_AUDIT_SCHEDULER, else a local cluster started here)")
    jobs.add_argument("--workers", type=whole_number(1), default=None, metavar="K",
                      help="worker processes of the local cluster (default: one per CPU)")
    jobs.add_argument("--queue-size", type=whole_number(1), default=None, metavar="N",
                      help="audits in flight before submissions get 503 (default 500)")
    jobs.add_argument("--token-quota", type=whole_number(1), default=None, metavar="N",
                      help="audits in flight per token before its submissions get 429 "
                           "(default 50)")
    jobs.add_argument("--job-seconds", type=positive_number, default=None, metavar="S",
                      help="time budget of one audit; then it ends inconclusive (default 600)")
    jobs.add_argument("--job-attempts", type=whole_number(1), default=None, metavar="N",
                      help="worker starts of an audit before it fails (default 3)")
    jobs.add_argument("--db-pool-size", type=whole_number(1), default=None, metavar="N",
                      help="database connections kept open (default 10; as many again "
                           "are opened under load)")


def run(args: argparse.Namespace) -> int:
    import uvicorn

    from audit.service.app import DEFAULT_MAX_BODY_BYTES, DEFAULT_MAX_ORDER, create_app
    from audit.service.db import default_database_url

    if not 0 < args.port < 65536:
        from audit.errors import InvalidModelError

        raise InvalidModelError(f"--port: got {args.port}, expected 1..65535", field="port")
    options = {name: value for name, value in (
        ("max_channels", args.max_channels), ("queue_size", args.queue_size),
        ("token_quota", args.token_quota), ("job_seconds", args.job_seconds),
        ("job_attempts", args.job_attempts), ("db_pool_size", args.db_pool_size),
        ("db_max_overflow", args.db_pool_size)) if value is not None}
    app = create_app(
        args.database or default_database_url(),
        max_body_bytes=args.max_body_bytes or DEFAULT_MAX_BODY_BYTES,
        max_order=args.max_order or DEFAULT_MAX_ORDER,
        scheduler=args.scheduler, local_workers=args.workers, **options,
    )
    uvicorn.run(app, host=args.host, port=args.port, log_level="info")
    return 0
