"""The migration history, checked with pytest-alembic on SQLite and, when BERTH_TEST_DATABASE_URL is
set, on a fresh PostgreSQL database: one head, base → head, every step down and up again, no trace
left by a downgrade, and models that match the DDL the migrations build. Then the service's own
`upgrade()`: the same head, an empty comparison (and a non-empty one when the models change), and
several processes' worth of engines migrating one empty database at once.

pytest-alembic's plugin is disabled in pyproject.toml (its collector fails on pytest 9), so its
built-in checks are called here with a runner of our own: on a connection of the engine berth builds,
through the service's env.py."""

from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest
import pytest_alembic
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext as AlembicContext
from pytest_alembic.tests.default import (
    test_model_definitions_match_ddl as model_definitions_match_ddl,
)
from pytest_alembic.tests.default import test_single_head_revision as single_head_revision
from pytest_alembic.tests.default import test_up_down_consistency as up_down_consistency
from pytest_alembic.tests.default import test_upgrade as upgrade_from_base
from sqlalchemy import Column, Connection, Engine, Integer, MetaData, inspect, text
from sqlmodel import SQLModel

from service.storage.engine import build_engine
from service.storage.migrate import MIGRATIONS, alembic_config, head_revision, is_at_head, upgrade
from tests.databases import fresh_postgresql_database, needs_postgresql, postgresql_server

TABLES = {"catalog", "default_catalog", "quote", "idempotency_key", "sweep", "fleet_plan", "api_key", "storage_probe"}
REVISIONS = sorted(path.name.split("_", 1)[0] for path in (MIGRATIONS / "versions").glob("[0-9]*_*.py"))
STARTING_TOGETHER = 4


@pytest.fixture(params=[pytest.param("sqlite"), pytest.param("postgresql", marks=needs_postgresql)])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """Both back ends in one run: this module's tests run on SQLite always, on PostgreSQL when set."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'migrations.db'}"
        return
    server = postgresql_server()
    assert server is not None
    with fresh_postgresql_database(server) as url:
        yield url


@pytest.fixture
def connection(engine: Engine) -> Iterator[Connection]:
    """The one connection the runner migrates on (it may hold SQLite's write lock between steps, so
    the tests look at the schema through it too)."""
    with engine.connect() as opened:
        yield opened


@pytest.fixture
def alembic_runner(engine: Engine, connection: Connection) -> Iterator[pytest_alembic.MigrationContext]:
    config = pytest_alembic.Config(alembic_config=alembic_config(engine.url.render_as_string(hide_password=False)))
    with pytest_alembic.runner(config=config, engine=connection) as runner:
        yield runner


def tables(bind: Engine | Connection) -> set[str]:
    return set(inspect(bind).get_table_names()) - {"alembic_version"}


def schema(connection: Connection) -> dict[str, object]:
    """What a migration can change, table by table: columns, indexes, keys and foreign keys."""
    inspector = inspect(connection)
    return {name: (
        [(c["name"], str(c["type"]), c["nullable"]) for c in inspector.get_columns(name)],
        sorted((i["name"], tuple(i["column_names"]), bool(i["unique"])) for i in inspector.get_indexes(name)),
        tuple(inspector.get_pk_constraint(name)["constrained_columns"]),
        sorted(tuple(u["column_names"]) for u in inspector.get_unique_constraints(name)),
        sorted((tuple(f["constrained_columns"]), f["referred_table"]) for f in inspector.get_foreign_keys(name)),
    ) for name in sorted(tables(connection))}


def test_the_history_has_a_single_head_and_it_is_the_newest_revision(
    alembic_runner: pytest_alembic.MigrationContext,
) -> None:
    single_head_revision(alembic_runner)
    assert alembic_runner.heads == [head_revision()] == [REVISIONS[-1]]
    # "base", every file's revision in order, then the "heads" alias
    assert alembic_runner.history.revisions == ["base", *REVISIONS, "heads"]


def test_an_empty_database_upgrades_from_base_to_head(alembic_runner: pytest_alembic.MigrationContext,
                                                      connection: Connection) -> None:
    assert alembic_runner.current == "base"
    upgrade_from_base(alembic_runner)
    assert alembic_runner.current == head_revision()
    assert tables(connection) == TABLES


def test_every_revision_goes_down_and_up_again(alembic_runner: pytest_alembic.MigrationContext,
                                               connection: Connection) -> None:
    up_down_consistency(alembic_runner)
    assert alembic_runner.current == head_revision()
    alembic_runner.migrate_down_to("base", return_current=False)
    assert tables(connection) == set()


def test_each_downgrade_restores_the_schema_its_upgrade_found(alembic_runner: pytest_alembic.MigrationContext,
                                                              connection: Connection) -> None:
    """pytest-alembic's experimental downgrade_leaves_no_trace does not run on SQLAlchemy 2.1 (its
    connection wrapper is refused), so the same idea by reflection: up one step, down again, and the
    schema is what it was; and every step changes something."""
    previous = "base"
    for revision in REVISIONS:
        before = schema(connection)
        alembic_runner.migrate_up_to(revision, return_current=False)
        after = schema(connection)
        assert after != before, f"{revision} changed nothing"
        alembic_runner.migrate_down_to(previous, return_current=False)
        assert schema(connection) == before, f"downgrading {revision} did not restore the schema before it"
        alembic_runner.migrate_up_to(revision, return_current=False)
        assert schema(connection) == after
        previous = revision
    assert set(schema(connection)) == TABLES


def test_the_models_match_the_ddl_the_migrations_build(alembic_runner: pytest_alembic.MigrationContext) -> None:
    model_definitions_match_ddl(alembic_runner)


def test_the_service_upgrade_reaches_head_with_nothing_left_to_autogenerate(engine: Engine) -> None:
    assert not is_at_head(engine)
    upgrade(engine)
    assert is_at_head(engine)
    assert tables(engine) == TABLES
    with engine.connect() as connection:
        context = AlembicContext.configure(connection, opts={"compare_type": True})
        assert compare_metadata(context, SQLModel.metadata) == []
        # The comparison is not blind: a column the migrations never added shows up as a difference.
        changed = MetaData()
        for table in SQLModel.metadata.sorted_tables:
            table.to_metadata(changed)
        changed.tables["quote"].append_column(Column("priority", Integer, nullable=True))
        differences = compare_metadata(context, changed)
    assert [(d[0], d[2], d[3].name) for d in differences] == [("add_column", "quote", "priority")]


def test_replicas_starting_together_migrate_one_empty_database_once(database_url: str) -> None:
    """Each 'replica' has its own engine (its own connections); PostgreSQL's advisory lock, or
    SQLite's BEGIN IMMEDIATE, makes them take turns: all succeed and the schema is built once."""
    engines = [build_engine(database_url) for _ in range(STARTING_TOGETHER)]
    try:
        with ThreadPoolExecutor(max_workers=STARTING_TOGETHER) as pool:
            list(pool.map(upgrade, engines))  # re-raises the first failure
        assert all(is_at_head(engine) for engine in engines)
        assert tables(engines[0]) == TABLES
        with engines[0].connect() as connection:
            versions = connection.exec_driver_sql("SELECT version_num FROM alembic_version").scalars().all()
        assert versions == [head_revision()]
    finally:
        for engine in engines:
            engine.dispose()


def test_the_lifecycle_migration_keeps_existing_catalogs_and_makes_the_newest_the_default_once(
    alembic_runner: pytest_alembic.MigrationContext, connection: Connection,
) -> None:
    """A database from before catalogs had a lifecycle: every catalog stays usable (active, its dates
    read from its content) and requests that name no catalog keep getting the one they got before."""
    alembic_runner.migrate_up_to("0004", return_current=False)
    rows = [("cat_old", "h1", '{"name": "old", "effective_from": "2026-01-01"}', "2026-12-01 10:00:00+00:00"),
            ("cat_new", "h2", '{"name": "new", "effective_from": "2027-01-01", "effective_until": "2027-06-30"}',
             "2026-12-02 10:00:00+00:00")]
    for ident, digest, content, created in rows:
        connection.execute(text("INSERT INTO catalog (id, name, currency, content_hash, content, created_at) "
                                "VALUES (:i, :i, 'EUR', :h, :c, :t)"),
                           {"i": ident, "h": digest, "c": content, "t": created})
    connection.commit()
    alembic_runner.migrate_up_one()
    catalogs = connection.execute(text(
        "SELECT id, status, effective_from, effective_until FROM catalog ORDER BY id")).all()
    assert [(c[0], c[1], str(c[2]), str(c[3])) for c in catalogs] == [
        ("cat_new", "active", "2027-01-01", "2027-06-30"), ("cat_old", "active", "2026-01-01", "None")]
    assert connection.execute(text("SELECT slot, catalog_id FROM default_catalog")).all() == [(1, "cat_new")]
