"""run_rule_hits against a direct implementation of the two rules on constructed sequences.

Rules: a point beyond the limit; a run of N consecutive points above the centre line
(Western Electric Statistical Quality Control Handbook, 1956; here above the reference median).
"""

import numpy as np
import pytest

from webapp.analysis.monitoring import RuleHit, run_rule_hits


def _direct(values, limit, median, n, statistic):
    hits = [RuleHit("beyond-limit", statistic, i, i) for i, v in enumerate(values) if v > limit]
    start = None
    for i, v in enumerate([*values, -np.inf]):
        if v > median and start is None:
            start = i
        elif v <= median and start is not None:
            if i - start >= n:
                hits.append(RuleHit("run-above-median", statistic, start, i - 1))
            start = None
    return sorted(hits, key=lambda h: (h.first, h.rule))


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("n", [2, 5, 8])
def test_hits_equal_a_direct_implementation(seed, n):
    rng = np.random.default_rng(seed)
    values = np.abs(rng.standard_normal(120)) + np.repeat(rng.random(12) > 0.6, 10) * 0.8
    got = run_rule_hits(values, limit=2.0, median=0.67, run_length=n, statistic="q")
    assert sorted(got, key=lambda h: (h.first, h.rule)) == _direct(list(values), 2.0, 0.67, n, "q")


def test_edge_cases():
    assert run_rule_hits([], limit=1, median=0, statistic="t2") == []
    # A run reaching the end counts; equal to the median breaks a run; equal to the limit is not beyond.
    hits = run_rule_hits([1, 1, 1, 0, 1, 1, 1, 1], limit=1, median=0, run_length=3, statistic="t2")
    assert hits == [RuleHit("run-above-median", "t2", 0, 2), RuleHit("run-above-median", "t2", 4, 7)]
