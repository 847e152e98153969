"""Alembic environment for roletrail studies.

roletrail runs migrations itself (tracker.store.database.upgrade), passing an
open connection in ``config.attributes["connection"]``.  Developers can also run
``alembic -c alembic.ini upgrade head`` with ``ROLETRAIL_DB`` set.
"""

from alembic import context
from sqlalchemy import create_engine

config = context.config


def _run(connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=None,
        render_as_batch=connection.dialect.name == "sqlite",
        transaction_per_migration=False,
    )
    with context.begin_transaction():
        context.run_migrations()


connection = config.attributes.get("connection")
if connection is not None:
    _run(connection)
else:
    from tracker.store.database import resolve_url

    engine = create_engine(config.get_main_option("sqlalchemy.url") or resolve_url(None))
    with engine.begin() as conn:
        _run(conn)
