"""Monitoring numerics: limits for new samples, run rules, production order."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.monitoring import FRAME_COLUMNS, RuleHit, UploadInfo, monitoring_frame, run_rule_hits
from tests.monitoring.wine import K, csv_bytes, fitted_reference, reference_and_uploads


def _info(number: int) -> UploadInfo:
    return UploadInfo(f"upload-{number}", f"later-{number}.csv", "lab", "2026-01-01T00:00:00+00:00", 0)


def _pairs(uploads):
    return [(_info(i), read_table(csv_bytes(u), filename=f"later-{i}.csv")) for i, u in enumerate(uploads, 1)]


@pytest.fixture(scope="module")
def wine():
    reference, uploads = reference_and_uploads()
    model, period, analysis = fitted_reference(reference)
    return model, period, analysis, uploads


def test_limits_for_new_samples_match_the_published_forms_computed_with_scipy(wine):
    model, _, analysis, uploads = wine
    frame = monitoring_frame(model, _pairs(uploads))
    n, alpha = 100, 0.95
    # Tracy, Young & Mason (1992), eq. for a future observation:
    # T²_lim = K (n - 1)(n + 1) / (n (n - K)) · F_{K, n-K}(α)
    t2_limit = K * (n - 1) * (n + 1) / (n * (n - K)) * stats.f.ppf(alpha, K, n - K)
    assert frame["t2_limit"].unique() == pytest.approx([t2_limit], rel=1e-12)
    # Jackson & Mudholkar (1979): θ_i = Σ_{a>K} λ_a^i, h0 = 1 - 2θ1θ3 / (3θ2²),
    # Q_lim = θ1 [c_α √(2θ2h0²)/θ1 + 1 + θ2h0(h0 - 1)/θ1²]^(1/h0)
    residual = analysis.fitted.pca.eigenvalues[K:]
    t1, t2_, t3 = (float(np.sum(residual**i)) for i in (1, 2, 3))
    h0 = 1 - 2 * t1 * t3 / (3 * t2_**2)
    c = stats.norm.ppf(alpha)
    q_limit = t1 * (c * np.sqrt(2 * t2_ * h0**2) / t1 + 1 + t2_ * h0 * (h0 - 1) / t1**2) ** (1 / h0)
    assert frame["q_limit"].unique() == pytest.approx([q_limit], rel=1e-10)
    assert (frame["t2_beyond"] == (frame["t2"] > t2_limit)).all()
    assert (frame["q_beyond"] == (frame["q"] > q_limit)).all()


def test_the_frame_scores_each_upload_as_projecting_it_by_hand(wine):
    model, _, _, uploads = wine
    frame = monitoring_frame(model, _pairs(uploads))
    assert list(frame.columns) == [*FRAME_COLUMNS, *(f"PC{a}" for a in range(1, K + 1))]
    assert len(frame) == sum(len(u) for u in uploads) and list(frame["position"]) == list(range(len(frame)))
    assert list(frame["sample"]) == [w for u in uploads for w in u["wine"]]
    # By hand (common practice): autoscale with the reference means and standard deviations, multiply by P.
    x = pd.concat(uploads).drop(columns="wine").to_numpy(dtype=float)
    pre = model.preprocessor
    reference = reference_and_uploads()[0].drop(columns="wine").to_numpy(dtype=float)
    z = (x - reference.mean(axis=0)) / reference.std(axis=0, ddof=1)
    scores = z @ model.loadings
    np.testing.assert_allclose(frame[[f"PC{a}" for a in range(1, K + 1)]].to_numpy(), scores, rtol=1e-9, atol=1e-12)
    residual = z - scores @ model.loadings.T
    np.testing.assert_allclose(frame["q"], np.sum(residual**2, axis=1), rtol=1e-9)
    np.testing.assert_allclose(frame["t2"], np.sum(scores**2 / model.eigenvalues, axis=1), rtol=1e-9)
    assert pre.variables == tuple(reference_and_uploads()[0].columns[1:])
    assert list(frame["order"].unique()) == ["1", "2", "3"]  # upload numbers without an order column


def test_an_order_column_of_numbers_or_dates_sets_production_order_across_uploads(wine):
    model, _, _, uploads = wine
    first, second = uploads[0].copy(), uploads[1].copy()
    # The second file was measured before the first: its runs come first.
    first["run"], second["run"] = np.arange(20, 40), np.arange(0, 20)
    frame = monitoring_frame(model, _pairs([first, second]), order_column="run")
    assert list(frame["sample"]) == [*second["wine"], *first["wine"]]
    assert list(frame["order"][:3]) == ["0", "1", "2"]
    first["run"] = [f"2026-03-{d:02d}T08:00" for d in range(11, 31)]
    second["run"] = [f"2026-03-01T{h:02d}:00" for h in range(20)]
    frame = monitoring_frame(model, _pairs([first, second]), order_column="run", label_column="wine")
    assert list(frame["sample"]) == [*second["wine"], *first["wine"]]
    assert frame["order"][0].startswith("2026-03-01T00:00")
    with pytest.raises(OrdinateError, match="order column 'batch_day'"):
        monitoring_frame(model, _pairs([first]), order_column="batch_day")
    first["run"] = "not a time"
    with pytest.raises(OrdinateError, match="neither a number nor a date"):
        monitoring_frame(model, _pairs([first]), order_column="run")


def _direct_hits(values, limit, median, run_length, statistic):
    """A plain loop over the points, as the rules are stated (Western Electric handbook, 1956)."""
    hits = [RuleHit("beyond-limit", statistic, i, i) for i, v in enumerate(values) if v > limit]
    run_start = None
    for i, v in enumerate([*values, float("nan")]):
        if v > median:
            run_start = i if run_start is None else run_start
        else:
            if run_start is not None and i - run_start >= run_length:
                hits.append(RuleHit("run-above-median", statistic, run_start, i - 1))
            run_start = None
    return hits


def test_run_rules_on_constructed_sequences():
    median, limit = 1.0, 5.0
    # Eight in a row above the median from position 2 to 9; one beyond the limit at 4; a run of 7 is not a hit.
    values = [0.5, 0.9, 1.5, 2, 6, 1.1, 1.2, 3, 1.01, 2, 0.2, *([2.0] * 7), 0.1]
    hits = run_rule_hits(values, limit=limit, median=median, run_length=8, statistic="q")
    assert hits == [RuleHit("beyond-limit", "q", 4, 4), RuleHit("run-above-median", "q", 2, 9)]
    assert run_rule_hits(values, limit=limit, median=median, run_length=7, statistic="q")[-1] == \
        RuleHit("run-above-median", "q", 11, 17)
    assert run_rule_hits([np.nan, 9.0], limit=limit, median=median, statistic="t2") == [RuleHit("beyond-limit", "t2", 1, 1)]
    with pytest.raises(OrdinateError, match="run length"):
        run_rule_hits(values, limit=limit, median=median, run_length=1, statistic="q")


@given(st.lists(st.one_of(st.floats(0, 10), st.just(float("nan"))), max_size=60), st.integers(2, 12))
def test_run_rules_agree_with_a_direct_loop(values, run_length):
    assert run_rule_hits(values, limit=7.5, median=3.0, run_length=run_length, statistic="t2") == \
        _direct_hits(values, 7.5, 3.0, run_length, "t2")


def test_the_reference_period_keeps_the_fit_and_its_medians(wine):
    _, period, analysis, _ = wine
    assert period.t2_median == pytest.approx(float(np.median(analysis.diagnostics.t2)))
    assert period.q_median == pytest.approx(float(np.median(analysis.diagnostics.q)))
    np.testing.assert_allclose(period.score_sd ** 2, analysis.fitted.pca.eigenvalues[:K], rtol=1e-9)
