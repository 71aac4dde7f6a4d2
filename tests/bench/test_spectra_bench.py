"""Wide spectra benchmarks: top-20 fit of 500 x 8 000 and 50 x 20 000 beside scikit-learn,
and the cost of the spectral steps (SNV + Savitzky–Golay) beside the fit.

Run on demand:  python3 -m pytest tests/bench -s -k spectra
Results are printed and appended to tests/bench/results.jsonl; docs/performance.md
("Engine") records the numbers of a quiet run. Only correctness is asserted.
"""

import numpy as np
import pytest
import scipy.signal

from tests.bench.test_engine_bench import _median_seconds, _record, compare_top_20_with_scikit_learn
from webapp.analysis.pca import fit_pca
from webapp.analysis.spectra import SpectralSteps


def _spectra(n, p, seed):
    rng = np.random.default_rng(seed)
    axis = np.linspace(0, 1, p)
    bands = np.exp(-0.5 * ((axis[None, :] - rng.uniform(0, 1, (30, 1))) / 0.02) ** 2)
    X = rng.standard_normal((n, 30)) @ bands * rng.normal(1, 0.1, (n, 1)) + rng.normal(0, 0.05, (n, 1))
    return X + 0.01 * rng.standard_normal((n, p))


@pytest.mark.parametrize("shape", [(500, 8_000), (50, 20_000)])
def test_wide_spectra_top_20_vs_fastest_scikit_learn_solver(shape):
    X = _spectra(*shape, seed=shape[1])
    compare_top_20_with_scikit_learn(X, f"wide spectra {shape[0]}x{shape[1]} top 20", ("randomized", "arpack", "full"))


def test_snv_and_savitzky_golay_cost_beside_the_fit():
    X = _spectra(500, 8_000, seed=3)
    steps = SpectralSteps(np.arange(8_000), ((0, 8_000),), "snv", None, (15, 2, 1))
    corrected, refused = steps.apply(X)
    snv = (X - X.mean(1, keepdims=True)) / X.std(1, ddof=1, keepdims=True)
    np.testing.assert_allclose(corrected, scipy.signal.savgol_filter(snv, 15, 2, deriv=1, axis=1), atol=1e-10)
    assert refused == {}
    t_steps = _median_seconds(lambda: steps.apply(X), 3)
    t_fit = _median_seconds(lambda: fit_pca(corrected - corrected.mean(0), 20), 3)
    _record("spectral steps 500x8000 (SNV + SG 15,2,1)", steps_s=t_steps, fit_top20_s=t_fit,
            ratio=t_steps / t_fit)
