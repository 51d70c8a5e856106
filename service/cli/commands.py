"""The `berth` command line: offline quotes, catalog checks, and the service."""

import json
import os
import re
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from enum import StrEnum
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table

from service.cli.render import print_comparison, print_plan, print_quote
from service.config import Settings
from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.errors import BerthError, FieldProblem, InvalidInput
from service.usecases.loading import load_file
from service.usecases.quoting import catalog_hash, envelope, quote

app = typer.Typer(add_completion=False, no_args_is_help=True,
                  help="Where a training campaign should run, and what it will cost.")
catalog_app = typer.Typer(no_args_is_help=True, help="Catalogs of hardware, sites and offers.")
app.add_typer(catalog_app, name="catalog")
keys_app = typer.Typer(no_args_is_help=True, help="API keys: a role (requester, analyst, admin) and a team each.")
app.add_typer(keys_app, name="keys")

# Tables are wide; piped output gets room instead of the 80 columns of a dumb terminal.
out = Console(width=None if sys.stdout.isatty() else 150)
err = Console(stderr=True)


class QuoteFormat(StrEnum):
    table = "table"
    json = "json"
    html = "html"
    csv = "csv"


def _fail(error: BerthError) -> None:
    err.print(f"[bold red]error:[/] {error.detail}", highlight=False)
    for problem in getattr(error, "problems", ()):
        err.print(f"  {problem.field}: {problem.reason}", highlight=False, markup=False)
    raise typer.Exit(code=2)


DatabaseOption = Annotated[str | None, typer.Option("--database", help="database URL (BERTH_DATABASE_URL)")]


def _storage(database: str | None) -> Any:
    from service.storage.engine import build_engine
    from service.storage.migrate import upgrade
    from service.storage.repository import Storage

    storage = Storage(build_engine(database or Settings().database_url))
    upgrade(storage.engine)
    return storage


@app.command("quote")
def quote_command(
    request_path: Annotated[Path, typer.Argument(metavar="REQUEST.json", help="the quote request")],
    catalog: Annotated[str | None, typer.Option(
        metavar="FILE_OR_ID", help="catalog file (JSON or YAML), or the id of a catalog stored in the database "
                                   "(default: the demo catalog file)")] = None,
    output: Annotated[QuoteFormat, typer.Option("--format", help="table, json, html (the report) or csv (the options)")]
    = QuoteFormat.table,
    database: DatabaseOption = None,
) -> None:
    """Quote one campaign offline, against a catalog file or a stored catalog. Nothing is stored."""
    try:
        request_in = load_file(QuoteRequestIn, request_path)
        chosen = _quote_catalog(catalog, database)
        if chosen.catalog_id is not None and request_in.catalog_id not in (None, chosen.catalog_id):
            problem = FieldProblem("catalog_id", f"the request names {request_in.catalog_id!r}, "
                                                 f"--catalog names {chosen.catalog_id!r}; drop one or make them equal")
            raise InvalidInput("the request and --catalog name different catalogs", [problem])
        body = quote(chosen.content, request_in)
    except BerthError as error:
        _fail(error)
        return
    document = envelope(body, catalog_hash=chosen.content_hash, quote_id=None, catalog_id=chosen.catalog_id,
                        created_at=datetime.now(UTC))
    if output is QuoteFormat.json:
        sys.stdout.write(json.dumps(document, indent=2, ensure_ascii=False) + "\n")
    elif output is QuoteFormat.html:
        from service.reports.html import render_report

        sys.stdout.write(render_report(document))
    elif output is QuoteFormat.csv:
        from service.reports.csv_export import options_csv

        sys.stdout.writelines(options_csv(document))
    else:
        print_quote(out, document)


class CompareFormat(StrEnum):
    table = "table"
    json = "json"


@app.command("compare")
def compare_command(
    first: Annotated[str, typer.Argument(metavar="A", help="a stored-quote file (JSON, as GET /v1/quotes/{id} or "
                                                           "`berth quote --format json` gives it) or a quote id")],
    second: Annotated[str, typer.Argument(metavar="B", help="the same, for the quote to compare A with")],
    output: Annotated[CompareFormat, typer.Option("--format", help="table or json")] = CompareFormat.table,
    database: DatabaseOption = None,
) -> None:
    """What changed from quote A to quote B: the recommendation, each option's total, days and layout,
    the break-even rows that moved and the inputs that differ. Ids are read from the database."""
    from service.usecases.comparing import compare_documents

    try:
        comparison = compare_documents(_quote_document(first, database), _quote_document(second, database))
    except BerthError as error:
        _fail(error)
        return
    if output is CompareFormat.json:
        sys.stdout.write(json.dumps(comparison, indent=2, ensure_ascii=False) + "\n")
    else:
        print_comparison(out, comparison)


QUOTE_ID = re.compile(r"q_[A-Za-z0-9]+")


def _quote_document(value: str, database: str | None) -> dict[str, Any]:
    """A quote document from a file, or from the database when `value` is a stored quote's id."""
    path = Path(value)
    if path.exists() or not QUOTE_ID.fullmatch(value):
        try:
            document = json.loads(path.read_text(encoding="utf-8"))
        except OSError as error:
            raise InvalidInput(f"cannot read {value}: {error.strerror}; give a stored-quote file or a quote id "
                               f"(q_...)") from error
        except ValueError as error:
            raise InvalidInput(f"{value} is not JSON: {error}") from error
        if not isinstance(document, dict) or not isinstance(document.get("options"), list) \
                or document.get("view") == "summary":
            raise InvalidInput(f"{value} is not a full stored quote (GET /v1/quotes/{{id}} or "
                               f"`berth quote --format json`)")
        return document
    from service.usecases.quotes import get_quote

    storage = _storage(database)
    try:
        return get_quote(storage, value).response
    finally:
        storage.dispose()


# The form `new_id("cat")` gives stored catalogs; anything else is never looked up in a database.
CATALOG_ID = re.compile(r"cat_[A-Za-z0-9]+")


@dataclass(frozen=True)
class QuoteCatalog:
    content: CatalogIn
    content_hash: str
    catalog_id: str | None  # None for a file


def _quote_catalog(value: str | None, database: str | None) -> QuoteCatalog:
    """A value that names an existing file is that file; else a stored catalog's id, read through the
    same use cases as `POST /v1/quotes`. Only an id opens a database: a file quotes offline."""
    path = Settings().demo_catalog if value is None else Path(value)
    if value is None or path.exists():
        catalog_in = load_file(CatalogIn, path)
        return QuoteCatalog(catalog_in, catalog_hash(catalog_in), None)
    neither = f"--catalog {value!r} is neither a readable file nor a stored catalog id"
    if not CATALOG_ID.fullmatch(value):
        raise InvalidInput(neither, [FieldProblem("--catalog", "no file of that name, and stored catalog ids "
                                                               "look like cat_ followed by letters and digits")])
    from sqlalchemy.exc import SQLAlchemyError

    from service.usecases.catalogs import ParsedCatalogs, catalog_to_use

    try:
        storage = _storage(database)
    except SQLAlchemyError as error:
        raise InvalidInput(f"cannot open the database to look up catalog {value!r}: {_first_line(error)}") from error
    try:
        ref = catalog_to_use(storage, value, field="--catalog", on=datetime.now(UTC).date())
        return QuoteCatalog(ParsedCatalogs().get(ref, storage), ref.content_hash, ref.id)
    except InvalidInput as error:
        if error.detail != "unknown catalog":
            raise  # it exists, but is retired or not effective today: say that
        where = storage.engine.url.render_as_string(hide_password=True)
        raise InvalidInput(neither, [FieldProblem("--catalog", f"no file of that name, and no catalog with that "
                                                               f"id in {where}")]) from error
    except SQLAlchemyError as error:
        raise InvalidInput(f"cannot read catalog {value!r} from the database: {_first_line(error)}") from error
    finally:
        storage.dispose()


def _first_line(error: Exception) -> str:
    return str(error).splitlines()[0] if str(error) else type(error).__name__


class SweepFormat(StrEnum):
    json = "json"
    csv = "csv"


@app.command("sweep")
def sweep_command(
    sweep_path: Annotated[Path, typer.Argument(metavar="SWEEP.json", help="the sweep request")],
    catalog: Annotated[Path | None, typer.Option(help="catalog file (default: the demo catalog)")] = None,
    output: Annotated[SweepFormat, typer.Option("--format", help="json (summary) or csv (every row)")]
    = SweepFormat.json,
    processes: Annotated[int, typer.Option("--processes", min=1, help="worker processes (default: one per CPU)")]
    = os.cpu_count() or 1,
) -> None:
    """Run a sweep of what-if scenarios offline, with a progress bar on the terminal's error stream."""
    from service.contract.sweep import SweepIn
    from service.usecases.chunk_pool import keep_freed_arrays
    from service.usecases.sweeps import SweepLimits, csv_chunks, prepare_sweep, run, sweep_document, tornado_bars

    keep_freed_arrays()  # this process only sweeps, as its workers do

    try:
        catalog_in = load_file(CatalogIn, catalog or Settings().demo_catalog)
        prepared = prepare_sweep(catalog_in, load_file(SweepIn, sweep_path), SweepLimits())
    except BerthError as error:
        _fail(error)
        return
    # Drawn at each chunk rather than by a thread of the bar's own, so that this process holds no thread and
    # the workers are forked from it (`chunk_pool._workers_context`); and standard output is left alone, the
    # sweep's own (the bar would print what is written there on the terminal's error stream).
    with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                  console=err, transient=True, auto_refresh=False, redirect_stdout=False) as bar:
        task = bar.add_task("scenarios", total=prepared.plan.scenarios)

        def advance(done: int, _total: int) -> None:
            bar.update(task, completed=done, refresh=True)

        if output is SweepFormat.csv:
            for text in csv_chunks(prepared, progress=advance, processes=processes):
                sys.stdout.write(text)
            return
        summary, rows = run(prepared, progress=advance, processes=processes)
    document = sweep_document(prepared, summary, rows, tornado_bars(prepared))
    sys.stdout.write(json.dumps(document, indent=2, ensure_ascii=False) + "\n")


class PlanFormat(StrEnum):
    json = "json"
    table = "table"
    html = "html"


@app.command("plan")
def plan_command(
    plan_path: Annotated[Path, typer.Argument(metavar="PLAN.json", help="the fleet-plan request")],
    catalog: Annotated[Path | None, typer.Option(help="catalog file (default: the demo catalog)")] = None,
    database: Annotated[str | None, typer.Option(help="database URL, for demand from stored quotes")] = None,
    output: Annotated[PlanFormat, typer.Option("--format", help="table, json or html (the page with its chart)")] \
        = PlanFormat.table,
) -> None:
    """Plan how many nodes to own against a demand forecast, offline."""
    from service.contract.fleet import FleetPlanIn
    from service.storage.engine import build_engine
    from service.storage.repository import Storage
    from service.usecases.fleet_plans import FleetLimits, fleet_plan

    storage = None if database is None else Storage(build_engine(database))

    def lookup(ids: Sequence[str]) -> list[Any]:
        assert storage is not None
        with storage.reading() as repository:
            return list(repository.quotes_by_id(list(ids)))

    try:
        catalog_in = load_file(CatalogIn, catalog or Settings().demo_catalog)
        request = load_file(FleetPlanIn, plan_path)
        with err.status("planning…"):
            body = fleet_plan(catalog_in, request, limits=FleetLimits(), lookup=None if storage is None else lookup)
    except BerthError as error:
        _fail(error)
        return
    if output is PlanFormat.json:
        sys.stdout.write(json.dumps(body, indent=2, ensure_ascii=False) + "\n")
    elif output is PlanFormat.html:
        from service.reports.html import render_plan

        sys.stdout.write(render_plan({"id": None, "created_at": None, **body}))
    else:
        print_plan(out, body)


@catalog_app.command("check")
def catalog_check(path: Annotated[Path, typer.Argument(metavar="CATALOG.json")]) -> None:
    """Validate a catalog and say what is wrong, field by field."""
    try:
        catalog_in = load_file(CatalogIn, path)
    except InvalidInput as error:
        _fail(error)
        return
    out.print(f"{path}: catalog {catalog_in.name!r} is valid: {len(catalog_in.sites)} sites, "
              f"{len(catalog_in.offers)} offers, {len(catalog_in.node_types)} node types, "
              f"currency {catalog_in.currency}", highlight=False)


@app.command("serve")
def serve(
    host: Annotated[str | None, typer.Option(help="address to listen on (BERTH_HOST)")] = None,
    port: Annotated[int | None, typer.Option(help="port (BERTH_PORT)")] = None,
    database: Annotated[str | None, typer.Option(help="database URL (BERTH_DATABASE_URL)")] = None,
    workers: Annotated[int, typer.Option(min=1, help="worker processes, about one per core (they share a SQLite "
                                                     "file safely: WAL, queued writers)")] = 1,
) -> None:
    """Run the HTTP service. Logs are JSON lines on standard error."""
    from service.api.app import create_app
    from service.api.serving import run_server

    overrides: dict[str, Any] = {k: v for k, v in
                                 {"host": host, "port": port, "database_url": database}.items() if v is not None}
    run_server(overrides, workers=workers, app=create_app, factory="service.api.app:create_app")


class KeyRole(StrEnum):
    requester = "requester"
    analyst = "analyst"
    admin = "admin"


@keys_app.command("add")
def keys_add(role: Annotated[KeyRole, typer.Option(help="what the key may do")],
             team: Annotated[str, typer.Option(help="the team it acts for")],
             database: DatabaseOption = None) -> None:
    """Issue a key. It is printed once, on the last line, and only its sha256 is kept."""
    from service.usecases.access import issue_key

    try:
        stored, key = issue_key(_storage(database), role=role.value, team=team, now=datetime.now(UTC))
    except BerthError as error:
        _fail(error)
        return
    err.print(f"issued {stored.id} ({stored.role}, team {stored.team}); store the key now, it is not shown again:",
              highlight=False)
    sys.stdout.write(key + "\n")


@keys_app.command("list")
def keys_list(database: DatabaseOption = None) -> None:
    """Every key: id, prefix, role, team, created, revoked."""
    from service.usecases.access import list_keys

    table = Table(title="API keys", title_justify="left")
    for header in ("id", "prefix", "role", "team", "created", "revoked"):
        table.add_column(header)
    for key in list_keys(_storage(database)):
        table.add_row(key.id, key.prefix + "…", key.role, key.team, key.created_at.isoformat(timespec="seconds"),
                      "" if key.revoked_at is None else key.revoked_at.isoformat(timespec="seconds"))
    out.print(table)


@keys_app.command("revoke")
def keys_revoke(key_id: Annotated[str, typer.Argument(help="the key's id, from `berth keys list`")],
                database: DatabaseOption = None) -> None:
    """Revoke a key at once (running servers stop accepting it on its next use)."""
    from service.usecases.access import revoke_key

    try:
        revoke_key(_storage(database), key_id, now=datetime.now(UTC))
    except BerthError as error:
        _fail(error)
        return
    out.print(f"revoked {key_id}", highlight=False)


@app.command("migrate")
def migrate(database: Annotated[str | None, typer.Option(help="database URL (BERTH_DATABASE_URL)")] = None) -> None:
    """Bring the database schema to the newest migration (run once per release, before the replicas)."""
    from service.storage.engine import build_engine
    from service.storage.migrate import head_revision, upgrade

    engine = build_engine(database or Settings().database_url)
    try:
        upgrade(engine)
    finally:
        engine.dispose()
    out.print(f"schema at {head_revision()}", highlight=False)


def main() -> None:
    app()


if __name__ == "__main__":
    main()
