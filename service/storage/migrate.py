"""Running the migrations from code: `upgrade()` at start-up and in tests, `is_at_head()` for /readyz."""

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, text

MIGRATIONS = Path(__file__).parent / "migrations"
MIGRATION_LOCK = 0x6265727468  # an arbitrary advisory-lock key of our own


def alembic_config(database_url: str) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    config.set_main_option("sqlalchemy.url", database_url.replace("%", "%%"))
    return config


def upgrade(engine: Engine) -> None:
    """Bring the schema to the newest revision, on the engine's own connection."""
    config = alembic_config(engine.url.render_as_string(hide_password=False))
    with engine.begin() as connection:
        if engine.dialect.name == "postgresql":
            # Replicas starting together take turns; SQLite's BEGIN IMMEDIATE already does this.
            connection.execute(text("SELECT pg_advisory_xact_lock(:key)"), {"key": MIGRATION_LOCK})
        config.attributes["connection"] = connection
        command.upgrade(config, "head")


def head_revision() -> str | None:
    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()


def is_at_head(engine: Engine) -> bool:
    with engine.connect() as connection:
        current = MigrationContext.configure(connection).get_current_revision()
    return current == head_revision()
