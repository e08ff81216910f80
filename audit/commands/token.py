"""``lti-audit token``: create, list and revoke API tokens of the audit service.

``create`` prints the token once (only its SHA-256 is stored); ``list`` shows the records
(never a token); ``revoke`` disables a token by id.
"""

from __future__ import annotations

import argparse
import json
import sys

NAME = "token"
HELP = "create, list or revoke API tokens of the audit service"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--database", metavar="URL", default=None,
                        help="SQLAlchemy database URL (default: sqlite file lti-audit.sqlite3 "
                             "in the current directory)")
    sub = parser.add_subparsers(dest="token_action", metavar="ACTION", required=True)
    create = sub.add_parser("create", help="create a token and print it once")
    create.add_argument("--holder", required=True, help="team member or supplier contact")
    who = create.add_mutually_exclusive_group(required=True)
    who.add_argument("--team", action="store_true", help="a team member's token (sees all audits)")
    who.add_argument("--supplier", metavar="NAME", help="a supplier's token (sees only its own audits)")
    lst = sub.add_parser("list", help="list tokens (never shows a token)")
    lst.add_argument("--format", choices=("text", "json"), default="text")
    rev = sub.add_parser("revoke", help="revoke a token by id")
    rev.add_argument("id", type=int)


def run(args: argparse.Namespace) -> int:
    from audit.service.db import default_database_url, open_database
    from audit.service.tokens import create_token, list_tokens, revoke_token

    _, sessions = open_database(args.database or default_database_url())
    with sessions() as session:
        if args.token_action == "create":
            role = "team" if args.team else "supplier"
            token, rec = create_token(session, holder=args.holder, role=role,
                                      supplier=args.supplier)
            sys.stdout.write(f"{token}\n")
            sys.stderr.write(
                f"created token id {rec['id']} for {rec['holder']} ({role}"
                f"{', supplier ' + rec['supplier'] if rec['supplier'] else ''}); it is shown "
                "only now, only its SHA-256 is stored\n")
            return 0
        if args.token_action == "list":
            records = list_tokens(session)
            if args.format == "json":
                sys.stdout.write(json.dumps(records, indent=2) + "\n")
            elif not records:
                sys.stdout.write("no tokens yet (create one with: lti-audit token create ...)\n")
            else:
                rows = [(str(r["id"]), f"{r['prefix']}...", r["role"], r["supplier"] or "-",
                         r["holder"], "revoked " + r["revoked_at"] if r["revoked_at"] else "active")
                        for r in records]
                header = ("id", "token starts", "role", "supplier", "holder", "state")
                widths = [max(len(row[k]) for row in [header, *rows]) for k in range(5)]
                for row in [header, *rows]:
                    sys.stdout.write(f"{row[0]:>{widths[0]}}  " + "  ".join(
                        f"{row[k]:<{widths[k]}}" for k in range(1, 5)) + f"  {row[5]}\n")
            return 0
        rec = revoke_token(session, args.id)
        sys.stdout.write(f"revoked token id {rec['id']} ({rec['holder']}) at {rec['revoked_at']}\n")
        return 0
