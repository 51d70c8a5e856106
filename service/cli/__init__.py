"""`berth`, the command line: quote, sweep and plan offline, check catalogs, manage keys, serve.

Importing this package imports nothing more: the `berth` console script is `from service.cli import main`, and
every worker process of a sweep imports the parent's main module again (multiprocessing does, for anything
defined there), so the command line's own libraries (typer, rich: 0.45 s) are imported by `main` alone."""


def main() -> None:
    from service.cli.commands import main as run

    run()


__all__ = ["main"]
