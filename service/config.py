"""One typed settings object, read from BERTH_* environment variables and passed in."""

from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

REPO_ROOT = Path(__file__).resolve().parents[1]


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="BERTH_", extra="ignore")

    host: str = "127.0.0.1"
    port: int = 8000
    database_url: str = "sqlite:///var/berth.db"
    demo_catalog: Path = REPO_ROOT / "pricing_examples" / "catalog.json"
    load_demo_catalog: bool = True  # on an empty database
    migrate_on_start: bool = True  # several replicas may instead run the migrations once, as a job
    sweep_max_scenarios: int = 10_000_000
    sweep_max_grid_values: int = 10_000  # per varied input
    sweep_answer_at_once: int = 20_000  # larger sweeps run in the background (202)
    sweep_heartbeat_seconds: float = 5.0  # a background sweep's runner says it is alive this often
    sweep_stale_after_seconds: float = 15.0  # and another process takes it over after this long without
    fleet_max_cells: int = 50_000_000  # candidate sizes × samples × months in one plan
    fleet_max_candidates: int = 2_000  # candidate sizes in one plan (each is a row of its answer)
    compute_queue_max: int = 32  # requests in the compute lane (computing or waiting); beyond, 503
    max_document_bytes: int = 16 * 1024 * 1024  # the largest answer stored as one row
    max_body_bytes: int = 1024 * 1024
    request_timeout_seconds: float = 30.0  # until a response starts; streamed CSV may run longer
    header_timeout_seconds: float = 10.0  # a connection whose request headers take longer is closed
    log_level: str = "INFO"
    rate_limit_per_second: float = 10.0  # per API key, refilled continuously
    rate_limit_burst: int = 60
    auth_failures_per_minute: float = 10.0  # unknown or revoked keys, per client address
    auth_failure_burst: int = 20
    auth_failure_addresses: int = 10_000  # client addresses remembered at most (least recent forgotten)
    # Proxies whose X-Forwarded-For / X-Forwarded-Proto are believed for the client's address
    # (comma-separated addresses or networks, or *). Local mode never believes them: it judges the socket.
    forwarded_allow_ips: str = "127.0.0.1"
    # With no API keys, berth answers loopback callers only; on a non-loopback address it refuses to
    # start keyless unless this says so (a container publishing its port would be useless, or worse).
    allow_keyless_on_network: bool = False
    sqlite_file_mode: str = Field("600", pattern=r"^[0-7]{3}$")  # octal permissions of a new SQLite file
