"""Generate Ordinate's SYNTHETIC spectra demo: near-infrared spectra of an invented lentil flour.

Everything here is invented - the product, the three mills and every number.
No real product, company, mill or measurement is described. The spectra are
drawn from a documented model with a fixed seed, so what the preprocessing and
the principal component analysis should find is known in advance (see
``demo_data/README.md``).

Scenario: the incoming-goods lab of a (fictional) pasta maker records a
near-infrared reflectance spectrum, 1100-2498 nm every 4 nm (350 positions,
written as column names ``1100`` ... ``2496``, in absorbance units log(1/R)), of
every lot of red-lentil flour delivered by three mills (Harrowgate, Vellmar,
Santa Brígida).

Model. Each spectrum is a sum of smooth absorption bands (Gaussian in
wavelength) weighted by the lot's composition, plus scatter, plus noise:

* composition: moisture (water bands near 1450 and 1940 nm), protein (near
  1510, 2055 and 2180 nm) and starch (near 1580, 2100 and 2280 nm), each lot
  drawn around its mill's mean; Santa Brígida mills a wetter, more protein-rich
  flour, Harrowgate and Vellmar overlap;
* scatter: particle size changes the light path, giving each spectrum its own
  multiplicative factor (about 1 +- 0.08) and additive offset (about 0 +- 0.03)
  plus a small linear tilt - the effects that SNV and MSC remove. Without a row
  correction the first component is mostly scatter; with SNV or MSC it is
  composition.
* noise: independent, 0.0015 absorbance units per position.

New lots (the second file) include two planted faults:

* ``LF-25-0011``: a very wet lot (moisture far above the normal range): larger
  water bands, along the usual correlations, so it is extreme within the model
  (high Hotelling's T²);
* ``LF-25-0014``: a lot carrying a foreign band near 1725 nm (an oily residue,
  invented), which the reference lots never show, so it sits off the model
  (high Q residual).

Run ``python demo_data/generate_spectra.py`` to (re)write the two CSV files
next to this script (``--out-dir`` writes elsewhere); ``generate(seed)``
returns the two tables without writing anything. The output is byte-for-byte
deterministic.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261203
REFERENCE_FILE = "synthetic_lentil_flour_nir.csv"
NEW_FILE = "synthetic_lentil_flour_nir_new_lots.csv"

WAVELENGTHS = np.arange(1100, 2500, 4)  # nm
MILLS = ("Harrowgate", "Vellmar", "Santa Brígida")
LOTS_PER_MILL = 40
NEW_LOTS = 16
WET_LOT = 11  # LF-25-0011
FOREIGN_BAND_LOT = 14  # LF-25-0014

# (centre nm, width nm, absorbance per unit of the constituent)
BANDS = {
    "moisture": ((1450, 45, 0.060), (1940, 50, 0.110)),
    "protein": ((1510, 40, 0.020), (2055, 40, 0.045), (2180, 35, 0.040)),
    "starch": ((1580, 50, 0.015), (2100, 45, 0.050), (2280, 40, 0.045)),
}
FOREIGN_BAND = (1725, 25, 0.06)
# mill mean composition (moisture, protein, starch), in arbitrary units around 1
MILL_MEANS = {
    "Harrowgate": (1.00, 1.00, 1.00),
    "Vellmar": (1.02, 0.98, 1.01),
    "Santa Brígida": (1.25, 1.15, 0.92),
}
COMPOSITION_SD = (0.08, 0.06, 0.05)
NOISE = 0.0015
DECIMALS = 5


def _band(centre: float, width: float) -> np.ndarray:
    return np.exp(-0.5 * ((WAVELENGTHS - centre) / width) ** 2)


def _spectra(rng: np.random.Generator, composition: np.ndarray) -> np.ndarray:
    """Absorbance spectra of lots with the given (n x 3) composition, scatter and noise added."""
    n = composition.shape[0]
    pure = np.array([sum(height * _band(c, w) for c, w, height in BANDS[name]) for name in BANDS])
    baseline = 0.25 + 0.10 * (WAVELENGTHS - WAVELENGTHS[0]) / np.ptp(WAVELENGTHS)
    clean = baseline + composition @ pure
    factor = rng.normal(1.0, 0.08, (n, 1))
    offset = rng.normal(0.0, 0.03, (n, 1))
    tilt = rng.normal(0.0, 0.01, (n, 1)) * (WAVELENGTHS - WAVELENGTHS.mean()) / np.ptp(WAVELENGTHS)
    return factor * clean + offset + tilt + rng.normal(0.0, NOISE, (n, WAVELENGTHS.size))


def _composition(rng: np.random.Generator, mills: list[str]) -> np.ndarray:
    means = np.array([MILL_MEANS[m] for m in mills])
    return means + rng.normal(0.0, 1.0, means.shape) * np.array(COMPOSITION_SD)


def _table(ids: list[str], mills: list[str], spectra: np.ndarray) -> pd.DataFrame:
    frame = pd.DataFrame(np.round(spectra, DECIMALS), columns=[str(w) for w in WAVELENGTHS])
    frame.insert(0, "mill", mills)
    frame.insert(0, "lot", ids)
    return frame


def generate(seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The reference lots and the new lots (with the two planted faults), as tables."""
    rng = np.random.default_rng(seed)
    mills = [mill for mill in MILLS for _ in range(LOTS_PER_MILL)]
    order = rng.permutation(len(mills))  # deliveries arrive mixed
    mills = [mills[i] for i in order]
    reference = _table(
        [f"LF-24-{i + 1:04d}" for i in range(len(mills))], mills, _spectra(rng, _composition(rng, mills))
    )
    new_mills = [MILLS[i % len(MILLS)] for i in range(NEW_LOTS)]
    composition = _composition(rng, new_mills)
    composition[WET_LOT - 1, 0] = 1.9  # moisture far beyond the reference lots
    spectra = _spectra(rng, composition)
    centre, width, height = FOREIGN_BAND
    spectra[FOREIGN_BAND_LOT - 1] += height * _band(centre, width)
    new = _table([f"LF-25-{i + 1:04d}" for i in range(NEW_LOTS)], new_mills, spectra)
    return reference, new


def write(out_dir: Path, seed: int = SEED) -> list[Path]:
    reference, new = generate(seed)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = [out_dir / REFERENCE_FILE, out_dir / NEW_FILE]
    for frame, path in zip((reference, new), paths):
        path.write_bytes(frame.to_csv(index=False, float_format=f"%.{DECIMALS}f", lineterminator="\n").encode("utf-8"))
    return paths


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out-dir", type=Path, default=Path(__file__).resolve().parent)
    for path in write(parser.parse_args().out_dir):
        print(f"wrote {path}")


if __name__ == "__main__":
    main()
