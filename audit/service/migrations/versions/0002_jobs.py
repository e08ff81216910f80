"""Audits as jobs: status, attempts, times, failure reason, time budget, idempotency key.

Existing audits were computed synchronously and are marked ``done``. Verdict, claims
outcome, report and seconds become nullable (unknown while an audit is queued or running).

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("audits") as batch:
        batch.add_column(sa.Column("status", sa.String(12), nullable=False, server_default="done"))
        batch.add_column(sa.Column("attempts", sa.Integer(), nullable=False, server_default="0"))
        batch.add_column(sa.Column("started_at", sa.DateTime(), nullable=True))
        batch.add_column(sa.Column("finished_at", sa.DateTime(), nullable=True))
        batch.add_column(sa.Column("failure", sa.Text(), nullable=True))
        batch.add_column(sa.Column("time_budget_seconds", sa.Float(), nullable=True))
        batch.add_column(sa.Column("idempotency_key", sa.String(200), nullable=True))
        batch.alter_column("verdict", existing_type=sa.String(20), nullable=True)
        batch.alter_column("claims_outcome", existing_type=sa.String(20), nullable=True)
        batch.alter_column("report", existing_type=sa.JSON(), nullable=True)
        batch.alter_column("seconds", existing_type=sa.Float(), nullable=True)
        batch.create_index("ix_audits_status", ["status"])
        batch.create_unique_constraint("uq_audits_token_idempotency_key",
                                       ["submitted_by", "idempotency_key"])


def downgrade() -> None:
    with op.batch_alter_table("audits") as batch:
        batch.drop_constraint("uq_audits_token_idempotency_key", type_="unique")
        batch.drop_index("ix_audits_status")
        for name in ("idempotency_key", "time_budget_seconds", "failure", "finished_at",
                     "started_at", "attempts", "status"):
            batch.drop_column(name)
