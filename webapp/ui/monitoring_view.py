"""What a monitoring view shows, from its state: no Dash here.

Reads the locked reference model and its monitoring table through
``services.reference_models`` (:mod:`webapp.store.reference_models`), applies
the run rules (:func:`webapp.analysis.monitoring.run_rule_hits`) and draws the
run charts (:mod:`webapp.figures.run_charts`). Used by the page callbacks, the
CSV export and the report alike, so all three show the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from webapp.analysis.contributions import q_residual_row, t2_contributions
from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import project_table
from webapp.analysis.monitoring import RuleHit, run_rule_hits
from webapp.figures import contributions_figure, scores_figure
from webapp.figures._points import BatchPoints
from webapp.figures.run_charts import scores_run_chart, statistic_run_chart
from webapp.figures.text import axis_title
from webapp.state.monitor_state import MonitorState

RULE_NAMES = {
    "beyond-limit": "Beyond the limit",
    "run-above-median": "Run above the reference median",
}
STATISTIC_NAMES = {"t2": "T²", "q": "Q"}


@dataclass(frozen=True)
class Monitored:
    """One locked reference model with its monitoring table, as a view shows it."""

    locked: object  # webapp.store.reference_models.LockedModel
    frame: pd.DataFrame
    uploads: tuple  # UploadInfo, upload order
    hits: tuple[RuleHit, ...]
    notices: tuple[str, ...]

    @property
    def components(self) -> int:
        return int(self.locked.model.loadings.shape[1])


def locked_model_for(services, state: MonitorState):
    """The locked model the view asks for (another version of the same name with ``ver=``), and notices."""
    locked = services.reference_models.get(state.model) if state.model else None
    if locked is None or state.version is None or state.version == locked.version:
        return locked, ()
    for other in services.reference_models.versions(locked.name):
        if other.version == state.version:
            return other, ()
    return locked, (f"Version {state.version} of “{locked.name}” is not known; showing version {locked.version}.",)


def load_monitored(services, state: MonitorState) -> Monitored | None:
    """Everything the view needs from the store, or ``None`` for an unknown model code."""
    locked, notices = locked_model_for(services, state)
    if locked is None:
        return None
    frame = services.reference_models.frame(locked.code)
    uploads = tuple(services.reference_models.uploads(locked.code))
    hits = tuple(rule_hits(frame, locked.reference, state))
    if state.component > locked.model.loadings.shape[1]:
        notices = (*notices, f"This model keeps {locked.model.loadings.shape[1]} component(s); "
                             "showing the scores on PC1.")
    return Monitored(locked, frame, uploads, hits, notices)


def shown_state(monitored: Monitored, state: MonitorState) -> MonitorState:
    """The state as drawn: a component the model lacks becomes PC1."""
    return state if state.component <= monitored.components else state.replace(component=1)


def rule_hits(frame: pd.DataFrame, reference, state: MonitorState) -> list[RuleHit]:
    """Hits of the rules switched on, for T² and Q, in production order (by first position)."""
    hits: list[RuleHit] = []
    if frame.empty:
        return hits
    for statistic in ("t2", "q"):
        values = frame[statistic].to_numpy(dtype=np.float64)
        limit = float(frame[f"{statistic}_limit"].iloc[0])
        median = float(reference.t2_median if statistic == "t2" else reference.q_median)
        found = run_rule_hits(values, limit=limit, median=median, run_length=state.run_length, statistic=statistic)
        hits += [hit for hit in found if hit.rule in state.rules]
    return sorted(hits, key=lambda h: (h.first, h.statistic, h.rule))


def run_charts(monitored: Monitored, state: MonitorState, *, presentation: bool = False) -> dict:
    """The three run charts: {"t2": fig, "q": fig, "scores": fig}."""
    state = shown_state(monitored, state)
    common = dict(show_reference=state.reference, window=(state.first, state.last), pick=state.pick,
                  presentation=presentation)
    reference = monitored.locked.reference
    confidence = monitored.locked.model.confidence
    return {
        "t2": statistic_run_chart(monitored.frame, reference, "t2", confidence=confidence,
                                  hits=monitored.hits, **common),
        "q": statistic_run_chart(monitored.frame, reference, "q", confidence=confidence,
                                 hits=monitored.hits, **common),
        "scores": scores_run_chart(monitored.frame, reference, state.component, band=state.band, **common),
    }


def _upload_names(monitored: Monitored) -> dict[str, str]:
    return {u.upload_id: u.file_name for u in monitored.uploads}


def hit_rows(monitored: Monitored) -> list[dict]:
    """One row per rule hit: rule, statistic, positions, the samples and the upload(s) they came from."""
    frame = monitored.frame.set_index("position", drop=False)
    names = _upload_names(monitored)
    rows = []
    for hit in monitored.hits:
        part = frame.loc[hit.first:hit.last]
        samples = part["sample"].astype(str).tolist()
        uploads = list(dict.fromkeys(names.get(str(u), str(u)) for u in part["upload"]))
        rows.append({
            "rule": RULE_NAMES.get(hit.rule, hit.rule),
            "statistic": STATISTIC_NAMES.get(hit.statistic, hit.statistic),
            "first": int(hit.first),
            "last": int(hit.last),
            "samples": samples[0] if len(samples) == 1 else f"{samples[0]} … {samples[-1]} ({len(samples)})",
            "uploads": ", ".join(uploads),
        })
    return rows


def upload_rows(monitored: Monitored) -> list[dict]:
    """The uploads, in upload order, with their positions in the monitoring table."""
    frame = monitored.frame
    rows = []
    for info in monitored.uploads:
        part = frame[frame["upload"].astype(str) == info.upload_id]
        rows.append({
            "upload_id": info.upload_id,
            "file_name": info.file_name,
            "uploaded_by": info.uploaded_by,
            "uploaded_at": info.uploaded_at,
            "samples": int(info.sample_count),
            "positions": f"{int(part['position'].min())}–{int(part['position'].max())}" if len(part) else "–",
            "flagged": int((part["t2_beyond"] | part["q_beyond"]).sum()) if len(part) else 0,
        })
    return rows


@dataclass(frozen=True)
class PickedSample:
    position: int
    sample: str
    upload_name: str
    t2: float
    q: float
    contributions: object  # go.Figure
    place: object  # go.Figure


def picked_sample(services, monitored: Monitored, position: int | None,
                  *, presentation: bool = False) -> PickedSample | None:
    """Contributions to T² and Q of the new sample at ``position``, and its place on the reference scores plot."""
    if position is None:
        return None
    rows = monitored.frame[monitored.frame["position"] == position]
    if rows.empty:
        return None
    row = rows.iloc[0]
    locked = monitored.locked
    model = locked.model
    table = services.reference_models.upload_table(locked.code, str(row["upload"]))
    projection = project_table(model, table)
    matches = [i for i, label in enumerate(projection.sample_labels) if label == str(row["sample"])]
    if not matches:
        raise OrdinateError(f"Sample '{row['sample']}' is no longer in its upload; reload the page.")
    x = projection.matrix[matches[0]]
    c = t2_contributions(x, model.loadings, model.eigenvalues)
    e = q_residual_row(x, model.loadings)
    contributions = contributions_figure(variables=list(model.variables), t2_contributions=c, q_residuals=e,
                                         label=str(row["sample"]), presentation=presentation)
    place = reference_place_figure(monitored, projection.scores[matches[0]], str(row["sample"]),
                                   presentation=presentation)
    name = _upload_names(monitored).get(str(row["upload"]), str(row["upload"]))
    return PickedSample(int(position), str(row["sample"]), name, float(row["t2"]), float(row["q"]),
                        contributions, place)


def reference_place_figure(monitored: Monitored, scores: np.ndarray, label: str, *, presentation: bool = False):
    """The reference period's scores on PC1/PC2 (PC1 alone against 0 for a one-component model) with one sample."""
    reference = monitored.locked.reference
    ref_scores = np.asarray(reference.scores, dtype=np.float64)
    ratios = np.asarray(monitored.locked.model.eigenvalues) / float(monitored.locked.model.total_variance)
    second = 1 if ref_scores.shape[1] > 1 else None
    y = ref_scores[:, second] if second is not None else np.zeros(ref_scores.shape[0])
    batch_y = float(scores[second]) if second is not None else 0.0
    return scores_figure(
        x=ref_scores[:, 0], y=y, labels=np.asarray(reference.labels, dtype=object),
        groups=np.full(len(reference.labels), "Reference period", dtype=object),
        x_title=axis_title(1, float(ratios[0])),
        y_title=axis_title(2, float(ratios[1])) if second is not None else "(one component kept)",
        title="Place on the reference scores plot", presentation=presentation, highlighted=label,
        batch=BatchPoints(x=np.array([float(scores[0])]), y=np.array([batch_y]),
                          labels=np.array([label], dtype=object), name=f"Picked: {label}"),
    )
