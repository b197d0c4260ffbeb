"""Alembic environment for the fewshot ledger.

fewshot applies migrations itself when it opens a ledger (``fewshot.ledger.engine``), passing
an open connection in ``config.attributes["connection"]``; this file also works from the
``alembic`` command line with ``-x url=...``.
"""

from alembic import context
from sqlalchemy import create_engine

from fewshot.ledger.models import Base

config = context.config
target_metadata = Base.metadata


def run() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        context.configure(
            connection=connection, target_metadata=target_metadata, render_as_batch=True
        )
        with context.begin_transaction():
            context.run_migrations()
        return
    url = context.get_x_argument(as_dictionary=True).get("url") or config.get_main_option(
        "sqlalchemy.url"
    )
    engine = create_engine(url)
    with engine.connect() as conn:
        context.configure(connection=conn, target_metadata=target_metadata, render_as_batch=True)
        with context.begin_transaction():
            context.run_migrations()


run()
