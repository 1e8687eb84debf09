"""Webhook secrets in the Standard Webhooks form, and secret rotation.

Deliveries are now signed as the Standard Webhooks specification says: the
secret is ``whsec_<base64>`` and the HMAC key is the decoded base64 part.
Until now the key was the secret string itself. So that every existing
webhook keeps signing with the same key, each stored secret ``s`` becomes
``whsec_`` + base64(``s`` as UTF-8): a receiver that kept the old secret
computes its new form the same way. The column grows to 300 characters to
hold the longer form (old secrets were at most 200).

Rotation keeps the secret it replaces valid for an overlap period:
``previous_secret`` and ``previous_secret_expires_at``.

Downgrade restores the old secret strings (the decoded key) and drops the
rotation columns; a secret made after the upgrade is random bytes, not text,
and is left in its new form (its receivers must then be given it again).

Revision ID: 0002_webhook_secrets
Revises: 0001
Create Date: 2026-12-04 22:30:00
"""

from __future__ import annotations

import base64
from collections.abc import Callable, Sequence

import sqlalchemy as sa
from alembic import op

import storage.models.base

revision: str = "0002_webhook_secrets"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_webhook = sa.table("webhook", sa.column("id", sa.String), sa.column("secret", sa.String))


def _rewrite(convert: Callable[[str], str]) -> None:
    conn = op.get_bind()
    rows = conn.execute(sa.select(_webhook.c.id, _webhook.c.secret)).all()
    for ident, secret in rows:
        conn.execute(_webhook.update().where(_webhook.c.id == ident).values(secret=convert(secret)))


def upgrade() -> None:
    with op.batch_alter_table("webhook", schema=None) as batch_op:
        batch_op.alter_column(
            "secret", existing_type=sa.String(length=200), type_=sa.String(length=300), existing_nullable=False
        )
        batch_op.add_column(sa.Column("previous_secret", sa.String(length=300), nullable=True))
        batch_op.add_column(
            sa.Column("previous_secret_expires_at", storage.models.base.UtcDateTime(timezone=True), nullable=True)
        )
    _rewrite(lambda s: "whsec_" + base64.b64encode(s.encode("utf-8")).decode("ascii"))


def downgrade() -> None:
    def back(s: str) -> str:
        # A secret created after the upgrade may not be text: keep it as it is then.
        try:
            return base64.b64decode(s[len("whsec_"):]).decode("utf-8")[:200]
        except (ValueError, UnicodeDecodeError):
            return s[:200]

    _rewrite(back)
    with op.batch_alter_table("webhook", schema=None) as batch_op:
        batch_op.drop_column("previous_secret_expires_at")
        batch_op.drop_column("previous_secret")
        batch_op.alter_column(
            "secret", existing_type=sa.String(length=300), type_=sa.String(length=200), existing_nullable=False
        )
