"""Initial schema: API tokens, audits, audit documents.

Revision ID: 0001
Revises:
Create Date: 2025-01-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "api_tokens",
        sa.Column("id", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("holder", sa.String(200), nullable=False),
        sa.Column("role", sa.String(20), nullable=False),
        sa.Column("supplier", sa.String(200), nullable=True),
        sa.Column("token_sha256", sa.String(64), nullable=False),
        sa.Column("prefix", sa.String(16), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("revoked_at", sa.DateTime(), nullable=True),
    )
    op.create_index("ix_api_tokens_token_sha256", "api_tokens", ["token_sha256"], unique=True)
    op.create_table(
        "audits",
        sa.Column("id", sa.String(32), primary_key=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("supplier", sa.String(200), nullable=True),
        sa.Column("submitted_by", sa.Integer(), sa.ForeignKey("api_tokens.id"), nullable=True),
        sa.Column("verdict", sa.String(20), nullable=False),
        sa.Column("claims_outcome", sa.String(20), nullable=False),
        sa.Column("reference_name", sa.String(500), nullable=True),
        sa.Column("model_names", sa.JSON(), nullable=False),
        sa.Column("body", sa.LargeBinary(), nullable=False),
        sa.Column("body_sha256", sa.String(64), nullable=False),
        sa.Column("lti_audit_version", sa.String(50), nullable=False),
        sa.Column("tolerances", sa.JSON(), nullable=False),
        sa.Column("report", sa.JSON(), nullable=False),
        sa.Column("seconds", sa.Float(), nullable=False),
    )
    op.create_index("ix_audits_created_at", "audits", ["created_at"])
    op.create_index("ix_audits_supplier", "audits", ["supplier"])
    op.create_index("ix_audits_verdict", "audits", ["verdict"])
    op.create_index("ix_audits_body_sha256", "audits", ["body_sha256"])
    op.create_table(
        "audit_documents",
        sa.Column("id", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("audit_id", sa.String(32), sa.ForeignKey("audits.id"), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("role", sa.String(20), nullable=False),
        sa.Column("name", sa.Text(), nullable=False),
        sa.Column("sha256", sa.String(64), nullable=False),
    )
    op.create_index("ix_audit_documents_audit_id", "audit_documents", ["audit_id"])
    op.create_index("ix_audit_documents_name", "audit_documents", ["name"])


def downgrade() -> None:
    op.drop_table("audit_documents")
    op.drop_table("audits")
    op.drop_table("api_tokens")
