"""Generate SYNTHETIC later uploads for the monitoring demo of the invented oat dessert.

Everything here is invented, like the rest of the demo (see ``generate.py``):
the product, the sites and every number. After the reference year 2024, the QC
lab of the fictional maker sends one file a week for ten weeks of 2025 (weeks
10 to 19), each with the batches made that week at the four sites, drawn from
the same process model with a fixed seed. Each file has a ``made_on`` column
(the production date, ISO 8601), the production-order column of the demo.

Planted, so a demonstration shows what the run charts and their rules catch:

* week 13: one over-fermented batch at Tessin (far out along the model:
  above the T² limit for new samples);
* from week 15 on: the fat reading of every batch is 0.10 g/100 g too high,
  and 0.03 more each week (an invented calibration drift of the fat
  analyser). Fat no longer follows the base solids as it did in the
  reference year, so Q rises; most batches stay below the Q limit, but Q
  stays above the reference median batch after batch, which the run rule
  (eight in a row) catches about two weeks into the drift.

Run ``python demo_data/generate_monitoring.py`` to (re)write the files in
``demo_data/monitoring/``. The output is byte-for-byte deterministic.
"""

from __future__ import annotations

import argparse
import datetime
import importlib.util
import sys
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20261203
FOLDER = "monitoring"
WEEKS = tuple(range(10, 20))  # 2025, weeks 10..19
BATCHES_PER_WEEK = 6
FAULT_WEEK, FAULT_SITE = 13, "Tessin"
DRIFT_COLUMN, DRIFT_FROM_WEEK = "Fat (g/100 g)", 15
DRIFT_STEP, DRIFT_PER_WEEK = 0.10, 0.03  # g/100 g at the first drifting week, then more each week
ORDER_COLUMN = "made_on"


def _base():
    spec = importlib.util.spec_from_file_location("ordinate_demo_generate", HERE / "generate.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules.setdefault(spec.name, module)
    spec.loader.exec_module(module)
    return module


def file_name(week: int) -> str:
    return f"synthetic_oat_dessert_2025_w{week:02d}.csv"


def simulate(seed: int = SEED) -> list[pd.DataFrame]:
    """One table per week, in production order."""
    gen = _base()
    rng = np.random.default_rng(seed)
    effects = np.array([p[3:6] for p in gen.PROPERTIES])
    drifting = gen.MEASURED.index(DRIFT_COLUMN)
    tables, serial = [], 0
    for week in WEEKS:
        sites = rng.choice(np.array(gen.SITES), size=BATCHES_PER_WEEK)
        lines = rng.choice(np.array(gen.LINES), size=BATCHES_PER_WEEK)
        days = np.sort(rng.integers(0, 5, size=BATCHES_PER_WEEK))  # Monday..Friday
        drivers = gen._drivers(rng, sites, lines, np.full(BATCHES_PER_WEEK, week))
        values = gen._measure(rng, drivers)
        if week == FAULT_WEEK:
            row = int(np.flatnonzero(sites == FAULT_SITE)[0]) if FAULT_SITE in sites else 0
            sites[row] = FAULT_SITE
            values[row] += effects[:, 0] * (6.0 - drivers[row, 0])
        if week >= DRIFT_FROM_WEEK:
            values[:, drifting] += DRIFT_STEP + DRIFT_PER_WEEK * (week - DRIFT_FROM_WEEK)
        for j, prop in enumerate(gen.PROPERTIES):
            values[:, j] = np.round(values[:, j], prop[1])
        monday = datetime.date.fromisocalendar(2025, week, 1)
        table = pd.DataFrame(values, columns=list(gen.MEASURED))
        table.insert(0, ORDER_COLUMN, [(monday + datetime.timedelta(days=int(d))).isoformat() for d in days])
        table.insert(0, "week", [f"2025-W{week:02d}"] * BATCHES_PER_WEEK)
        table.insert(0, "line", lines)
        table.insert(0, "site", sites)
        table.insert(0, "batch_id", [f"OD-25-{1000 + serial + i:04d}" for i in range(BATCHES_PER_WEEK)])
        serial += BATCHES_PER_WEEK
        tables.append(table)
    return tables


def write(out_dir: Path | str | None = None, seed: int = SEED) -> list[Path]:
    folder = Path(out_dir) if out_dir is not None else HERE / FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    gen = _base()
    paths = []
    for week, table in zip(WEEKS, simulate(seed)):
        path = folder / file_name(week)
        path.write_bytes(gen.to_csv_text(table).encode("utf-8"))
        paths.append(path)
    return paths


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write the synthetic weekly uploads of Ordinate's monitoring demo.")
    parser.add_argument("--out-dir", type=Path, default=None,
                        help="folder for the CSV files (default: demo_data/monitoring next to this script)")
    parser.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED}, as shipped)")
    args = parser.parse_args(argv)
    for path in write(args.out_dir, args.seed):
        print(f"wrote {path}")


if __name__ == "__main__":
    main()
