"""catalog lifecycle: status, effective dates, an explicit default

Revision ID: 0005
Revises: 0004
Create Date: 2027-01-04 09:00:00

Existing databases keep working: every catalog stays active, its effective dates are copied from its
stored content, and the newest catalog (the one requests without a catalog_id used until now) becomes
the default, once.
"""

import json
from collections.abc import Sequence
from datetime import date

import sqlalchemy as sa
import sqlmodel
from alembic import op


revision: str = '0005'
down_revision: str | None = '0004'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table('catalog', schema=None) as batch_op:
        batch_op.add_column(sa.Column('status', sqlmodel.sql.sqltypes.AutoString(length=16), nullable=False,
                                      server_default='active'))
        batch_op.add_column(sa.Column('effective_from', sa.Date(), nullable=True))
        batch_op.add_column(sa.Column('effective_until', sa.Date(), nullable=True))
    op.create_table('default_catalog',
    sa.Column('slot', sa.Integer(), nullable=False),
    sa.Column('catalog_id', sqlmodel.sql.sqltypes.AutoString(length=40), nullable=False),
    sa.Column('set_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['catalog_id'], ['catalog.id'], ),
    sa.PrimaryKeyConstraint('slot')
    )

    catalog = sa.table('catalog', sa.column('id', sa.String), sa.column('content', sa.Text),
                       sa.column('created_at', sa.DateTime(timezone=True)),
                       sa.column('effective_from', sa.Date), sa.column('effective_until', sa.Date))
    bind = op.get_bind()
    for ident, content in bind.execute(sa.select(catalog.c.id, catalog.c.content)).all():
        document = json.loads(content)
        dates = {name: date.fromisoformat(document[name]) for name in ('effective_from', 'effective_until')
                 if document.get(name)}
        if dates:
            bind.execute(catalog.update().where(catalog.c.id == ident).values(**dates))
    newest = bind.execute(sa.select(catalog.c.id, catalog.c.created_at)
                          .order_by(catalog.c.created_at.desc(), catalog.c.id.desc()).limit(1)).first()
    if newest is not None:
        default = sa.table('default_catalog', sa.column('slot', sa.Integer), sa.column('catalog_id', sa.String),
                           sa.column('set_at', sa.DateTime(timezone=True)))
        bind.execute(default.insert().values(slot=1, catalog_id=newest[0], set_at=newest[1]))


def downgrade() -> None:
    op.drop_table('default_catalog')
    with op.batch_alter_table('catalog', schema=None) as batch_op:
        batch_op.drop_column('effective_until')
        batch_op.drop_column('effective_from')
        batch_op.drop_column('status')
