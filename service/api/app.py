"""The app factory: nothing is built at import; `create_app(settings)` wires everything."""

from fastapi import FastAPI

from service import __version__
from service.config import Settings


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or Settings()
    app = FastAPI(title="berth", version=__version__,
                  description="Where a training campaign should run, and what it will cost.")
    app.state.settings = settings

    @app.get("/healthz", tags=["probes"])
    def healthz() -> dict[str, str]:
        """Liveness: the process answers. Checks nothing external."""
        return {"status": "ok"}

    return app
