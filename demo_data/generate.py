"""Generate Ordinate's SYNTHETIC demo data: QC results for an invented oat-based dessert.

Everything here is invented - the product, the company, the four production
sites and every number. No real product, company, site or measurement is
described. The data are drawn from a documented model with a fixed seed, so the
structure a principal component analysis should find is known in advance (see
``demo_data/README.md``).

Scenario: the QC lab of a (fictional) maker of dairy alternatives measures every
batch of a fermented oat dessert made at four sites (Lindholm, Brackwater,
Ostrava-Nord, Tessin), each with two filling lines, over one year.

Model. Each batch has three hidden drivers, each roughly standard normal:

* ``fermentation`` - how far the culture has fermented: lowers pH and total
  sugars, raises titratable acidity, culture count and (slightly) syneresis;
  a little stronger in summer (a seasonal term over the week number);
* ``solids`` - oat base solids: raises dry matter, viscosity, firmness,
  protein and fat, lowers syneresis and particle size;
* ``heat`` - intensity of the heat treatment: lowers colour L*, raises colour b*
  and particle size, raises viscosity a little.

Sites shift the drivers: Lindholm and Brackwater run the same recipe and overlap;
Ostrava-Nord uses more base solids and a stronger heat treatment and stands
apart; Tessin ferments a little further. Lines add small offsets. Each property
gets independent measurement noise. About 1 % of the measured cells of normal
batches are blanked at random (missing values).

Off-spec batches are planted with two different faults:

* over-fermented - the fermentation driver far beyond the normal range; every
  property moves *along* the usual correlations, so these batches are extreme
  in the model plane (high Hotelling's T²);
* stabiliser dosing fault - more dry matter but low viscosity and firmness and
  high syneresis, which *breaks* the usual solids correlations, so these batches
  sit off the model plane (high Q residual) rather than far out along it.

Run ``python demo_data/generate.py`` to (re)write the two CSV files next to this
script (``--out-dir`` writes elsewhere); ``generate(seed)`` returns the two
tables without writing anything. The output is byte-for-byte deterministic.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261202
REFERENCE_FILE = "synthetic_oat_dessert_batches.csv"
NEW_FILE = "synthetic_oat_dessert_new_batches.csv"

SITES = ("Lindholm", "Brackwater", "Ostrava-Nord", "Tessin")
LINES = ("L1", "L2")
BATCHES_PER_SITE = 60  # reference year: 4 x 60 = 240 batches
NEW_BATCHES = 20
MISSING_FRACTION = 0.01

# Site shifts of the hidden drivers (fermentation, solids, heat).
SITE_SHIFT = {
    "Lindholm": (0.0, 0.0, 0.0),
    "Brackwater": (0.15, -0.1, 0.1),
    "Ostrava-Nord": (-0.2, 1.6, 2.0),
    "Tessin": (1.1, -0.5, -0.3),
}
# Small line offsets of the drivers (same for every site: L2 runs a little warmer and thicker).
LINE_SHIFT = {"L1": (0.0, 0.0, 0.0), "L2": (0.15, 0.2, 0.1)}

# Measured property: (header, decimals written, intercept, effect of fermentation, solids, heat, noise sd).
# Effects are in the property's own unit per unit of the hidden driver.
PROPERTIES: tuple[tuple[str, int, float, float, float, float, float], ...] = (
    ("pH", 2, 4.45, -0.10, 0.00, 0.00, 0.025),
    ("Titratable acidity (% lactic acid)", 3, 0.62, 0.075, 0.00, 0.00, 0.015),
    ("Viscosity (mPa s)", 0, 1900.0, 0.0, 260.0, 60.0, 70.0),
    ("Dry matter (%)", 2, 18.5, 0.0, 1.30, 0.0, 0.20),
    ("Protein (g/100 g)", 2, 3.10, 0.0, 0.22, 0.0, 0.07),
    ("Fat (g/100 g)", 2, 2.40, 0.0, 0.12, 0.0, 0.07),
    ("Total sugars (g/100 g)", 2, 7.20, -0.55, 0.30, 0.0, 0.18),
    ("Colour L*", 1, 82.0, 0.0, 0.0, -1.40, 0.35),
    ("Colour b*", 1, 11.0, 0.0, 0.0, 1.10, 0.30),
    ("Syneresis (mL/100 g)", 2, 3.20, 0.30, -0.55, 0.0, 0.25),
    ("Culture count (log10 CFU/g)", 2, 8.20, 0.22, 0.0, 0.0, 0.10),
    ("Firmness (N)", 3, 0.86, 0.02, 0.10, 0.0, 0.03),
    ("Particle size d50 (µm)", 1, 42.0, 0.0, -1.8, 2.2, 1.6),
)
MEASURED = tuple(p[0] for p in PROPERTIES)
ID_COLUMNS = ("batch_id", "site", "line", "week")

# Planted faults, as (kind, site, line, week) in the reference year and in the new batches.
REFERENCE_FAULTS = (
    ("over-fermented", "Brackwater", "L1", 14),
    ("over-fermented", "Tessin", "L2", 29),
    ("over-fermented", "Lindholm", "L2", 41),
    ("dosing fault", "Lindholm", "L1", 8),
    ("dosing fault", "Ostrava-Nord", "L2", 23),
    ("dosing fault", "Tessin", "L1", 47),
)
NEW_FAULTS = (
    ("over-fermented", "Lindholm", "L1", 3),
    ("dosing fault", "Brackwater", "L2", 6),
)


@dataclass(frozen=True)
class DemoData:
    """The generated tables and the planted off-spec batches (batch id -> kind of fault)."""

    reference: pd.DataFrame
    new: pd.DataFrame
    off_spec: dict[str, str]


def _drivers(rng: np.random.Generator, sites: np.ndarray, lines: np.ndarray, weeks: np.ndarray) -> np.ndarray:
    """Hidden (fermentation, solids, heat) for each batch: site + line shifts, season, and batch-to-batch spread."""
    shift = np.array([SITE_SHIFT[s] for s in sites]) + np.array([LINE_SHIFT[line] for line in lines])
    season = np.zeros((len(weeks), 3))
    season[:, 0] = 0.4 * np.sin(2 * np.pi * (weeks - 16) / 52)  # warmer summers ferment further
    return shift + season + rng.normal(size=(len(weeks), 3))


def _measure(rng: np.random.Generator, drivers: np.ndarray) -> np.ndarray:
    """Properties from the drivers plus independent measurement noise."""
    intercept = np.array([p[2] for p in PROPERTIES])
    effects = np.array([p[3:6] for p in PROPERTIES])  # properties x drivers
    noise_sd = np.array([p[6] for p in PROPERTIES])
    return intercept + drivers @ effects.T + rng.normal(size=(len(drivers), len(PROPERTIES))) * noise_sd


def _plant_faults(values: np.ndarray, drivers: np.ndarray, rows: list[int], kinds: list[str]) -> None:
    """Overwrite the planted rows in place with the two kinds of off-spec batch."""
    column = {name: j for j, name in enumerate(MEASURED)}
    effects = np.array([p[3:6] for p in PROPERTIES])
    for row, kind in zip(rows, kinds):
        if kind == "over-fermented":
            # push fermentation to about 6 sd: every property moves along its usual correlation
            values[row] += effects[:, 0] * (6.0 - drivers[row, 0])
        else:
            # stabiliser dosing fault: dry matter up, but the structure it normally brings is missing
            values[row, column["Dry matter (%)"]] += 2.4
            values[row, column["Viscosity (mPa s)"]] -= 520.0
            values[row, column["Firmness (N)"]] -= 0.20
            values[row, column["Syneresis (mL/100 g)"]] += 1.1


def _blank_cells(rng: np.random.Generator, values: np.ndarray, keep_rows: set[int]) -> None:
    """Blank MISSING_FRACTION of all measured cells, chosen at random among the normal batches."""
    n_rows, n_cols = values.shape
    candidates = np.array([r * n_cols + c for r in range(n_rows) if r not in keep_rows for c in range(n_cols)])
    count = round(MISSING_FRACTION * n_rows * n_cols)
    chosen = rng.choice(candidates, size=count, replace=False)
    values[chosen // n_cols, chosen % n_cols] = np.nan


def _batch_table(
    rng: np.random.Generator,
    sites: np.ndarray,
    lines: np.ndarray,
    weeks: np.ndarray,
    faults: tuple[tuple[str, str, str, int], ...],
    year: int,
) -> tuple[pd.DataFrame, dict[str, str]]:
    """One table of batches: add the faulty batches, sort by week, number, measure, blank cells."""
    fault_sites = np.array([f[1] for f in faults])
    sites = np.concatenate([sites, fault_sites])
    lines = np.concatenate([lines, np.array([f[2] for f in faults])])
    weeks = np.concatenate([weeks, np.array([f[3] for f in faults])])
    kinds = [""] * (len(sites) - len(faults)) + [f[0] for f in faults]

    order = np.lexsort((lines, sites, weeks))  # by week, then site, then line: production order
    sites, lines, weeks = sites[order], lines[order], weeks[order]
    kinds = [kinds[i] for i in order]
    batch_ids = [f"OD-{year % 100:02d}-{i + 1:04d}" for i in range(len(sites))]

    drivers = _drivers(rng, sites, lines, weeks)
    values = _measure(rng, drivers)
    fault_rows = [i for i, kind in enumerate(kinds) if kind]
    _plant_faults(values, drivers, fault_rows, [kinds[i] for i in fault_rows])
    _blank_cells(rng, values, set(fault_rows))

    for j, prop in enumerate(PROPERTIES):
        values[:, j] = np.round(values[:, j], prop[1])
    table = pd.DataFrame(values, columns=list(MEASURED))
    # Written as text ("2024-W07"): a time stamp, not a measurement, so it is
    # not offered as a PCA variable.
    table.insert(0, "week", [f"{year}-W{int(week):02d}" for week in weeks])
    table.insert(0, "line", lines)
    table.insert(0, "site", sites)
    table.insert(0, "batch_id", batch_ids)
    return table, {batch_ids[i]: kinds[i] for i in fault_rows}


def simulate(seed: int = SEED) -> DemoData:
    """Generate both tables and the list of planted off-spec batches."""
    rng = np.random.default_rng(seed)

    # Reference year 2024: 60 batches per site (minus its planted faults), weeks 1..52, lines at random.
    n_normal = {site: BATCHES_PER_SITE - sum(f[1] == site for f in REFERENCE_FAULTS) for site in SITES}
    sites = np.repeat(np.array(SITES), [n_normal[s] for s in SITES])
    lines = rng.choice(np.array(LINES), size=len(sites))
    weeks = rng.integers(1, 53, size=len(sites))
    reference, off_spec = _batch_table(rng, sites, lines, weeks, REFERENCE_FAULTS, year=2024)

    # New batches: the first weeks of 2025, same process, two of them off-spec.
    n_new = NEW_BATCHES - len(NEW_FAULTS)
    new_sites = rng.choice(np.array(SITES), size=n_new)
    new_lines = rng.choice(np.array(LINES), size=n_new)
    new_weeks = rng.integers(1, 9, size=n_new)
    new, new_off_spec = _batch_table(rng, new_sites, new_lines, new_weeks, NEW_FAULTS, year=2025)
    return DemoData(reference=reference, new=new, off_spec={**off_spec, **new_off_spec})


def generate(seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The reference table (240 batches) and the new batches (20), as data frames."""
    data = simulate(seed)
    return data.reference, data.new


def to_csv_text(table: pd.DataFrame) -> str:
    """CSV text with each property at its own number of decimals, blanks for missing, "\\n" line ends."""
    decimals = {p[0]: p[1] for p in PROPERTIES}
    formatted = table.copy()
    for name, places in decimals.items():
        formatted[name] = [("" if np.isnan(v) else f"{v:.{places}f}") for v in table[name].to_numpy(dtype=float)]
    return formatted.to_csv(index=False, lineterminator="\n")


def write(out_dir: Path | str | None = None, seed: int = SEED) -> tuple[Path, Path]:
    """Write both CSV files (UTF-8) into ``out_dir`` (default: this script's folder); return their paths."""
    folder = Path(out_dir) if out_dir is not None else Path(__file__).resolve().parent
    folder.mkdir(parents=True, exist_ok=True)
    reference, new = generate(seed)
    paths = (folder / REFERENCE_FILE, folder / NEW_FILE)
    for table, path in zip((reference, new), paths):
        path.write_bytes(to_csv_text(table).encode("utf-8"))
    return paths


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write Ordinate's synthetic demo data (invented oat dessert QC).")
    parser.add_argument(
        "--out-dir", type=Path, default=None, help="folder for the CSV files (default: next to this script)"
    )
    parser.add_argument(
        "--seed", type=int, default=SEED, help=f"random seed (default {SEED}, which the shipped files use)"
    )
    args = parser.parse_args(argv)
    for path in write(args.out_dir, args.seed):
        print(f"wrote {path}")


if __name__ == "__main__":
    main()
