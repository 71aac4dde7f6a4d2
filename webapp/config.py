"""Settings of one Ordinate server, passed to the app factory."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

REPOSITORY_ROOT = Path(__file__).resolve().parent.parent
DEMO_DATASET = REPOSITORY_ROOT / "demo_data" / "synthetic_oat_dessert_batches.csv"
DEMO_TITLE = "Oat dessert batches, four sites (synthetic demo data)"
#: Weekly uploads of the demo's locked reference model (demo_data/generate_monitoring.py).
DEMO_MONITORING = REPOSITORY_ROOT / "demo_data" / "monitoring"


@dataclass(frozen=True)
class AppConfig:
    data_dir: Path = Path(".ordinate-data")
    max_upload_mb: float = 200.0
    demo_dataset: Path | None = DEMO_DATASET
    demo_monitoring: Path | None = DEMO_MONITORING  # None: no demo reference model
    title: str = "Ordinate"
    # Access control (see docs/deployment.md): a shared key that team members
    # enter once; None with require_access_key False means open (loopback only).
    access_key: str | None = field(default=None, repr=False)
    require_access_key: bool = False

    @property
    def max_upload_bytes(self) -> int:
        return int(self.max_upload_mb * 1024 * 1024)

    @classmethod
    def from_environment(cls, **overrides) -> "AppConfig":
        """Defaults, then ORDINATE_* environment variables, then explicit overrides."""
        values = {}
        if "ORDINATE_DATA_DIR" in os.environ:
            values["data_dir"] = Path(os.environ["ORDINATE_DATA_DIR"])
        if "ORDINATE_MAX_UPLOAD_MB" in os.environ:
            values["max_upload_mb"] = float(os.environ["ORDINATE_MAX_UPLOAD_MB"])
        values.update({k: v for k, v in overrides.items() if v is not None})
        return cls(**values)
