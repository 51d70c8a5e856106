"""One typed settings object, read from BERTH_* environment variables and passed in."""

from pathlib import Path

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
    max_body_bytes: int = 1024 * 1024
    request_timeout_seconds: float = 30.0  # until a response starts; streamed CSV may run longer
    log_level: str = "INFO"
    rate_limit_per_second: float = 10.0  # per API key, refilled continuously
    rate_limit_burst: int = 60
