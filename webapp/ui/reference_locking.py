"""Lock a saved view's model as a reference model (used by the page, the CLI and the demo start-up).

The lock freezes what the saved view shows: its preprocessing, the components
kept (the view's K, or the recommended K), the confidence and the limits, with
the fingerprint (SHA-256) of the dataset's file and the reference period's
scores, T² and Q. The frozen copy lives in the reference-model store, so later
edits or the deletion of the dataset or view change nothing.
"""

from __future__ import annotations

from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import model_from_analysis
from webapp.analysis.monitoring import reference_period
from webapp.analysis.pipeline import Analysis
from webapp.state import parse_query
from webapp.ui.resolution import DatasetNotFound
from webapp.ui.view_model import resolve, view_diagnostics

__all__ = ["lock_saved_view", "lock_view_state"]


def lock_saved_view(services, view_id: str, name: str, *, order_column: str | None = None):
    """(locked model, manager key) for the saved view ``view_id``; raises ``OrdinateError``."""
    saved = services.store.view(view_id)
    if saved is None or services.store.dataset(saved.dataset_token) is None:
        raise OrdinateError("This saved view or its dataset is no longer stored, so its model cannot be locked.")
    state, _ = parse_query(saved.query)
    return lock_view_state(services, state, name, source_view_id=saved.view_id, order_column=order_column)


def lock_view_state(services, state, name: str, *, source_view_id: str | None = None,
                    order_column: str | None = None):
    """(locked model, manager key) for the model a view state shows."""
    try:
        resolved = resolve(services, state)
    except DatasetNotFound:
        raise OrdinateError("The dataset of this view is no longer stored, so its model cannot be locked.") from None
    diagnostics = view_diagnostics(resolved, state)
    model = model_from_analysis(Analysis(resolved.fitted, diagnostics))
    fitted, k = resolved.fitted, diagnostics.components
    period = reference_period(model, fitted.prepared.sample_labels, fitted.pca.scores[:, :k],
                              diagnostics.t2, diagnostics.q)
    return services.reference_models.lock(
        model, name=name, reference=period, data_fingerprint=resolved.record.content_hash,
        source_view_id=source_view_id, dataset_token=resolved.record.token,
        order_column=order_column, label_column=resolved.table.id_column)


#: Store settings of the demo's locked reference model (claimed by the first worker).
DEMO_MONITORING_SETTING = "demo-monitoring-code"
DEMO_MODEL_NAME = "Oat dessert release model (synthetic demo)"


def seed_demo_monitoring(services, folder) -> str | None:
    """Lock the demo dataset's default view as a reference model and add the demo's weekly uploads.

    Once per data directory (the first worker to claim it does the work); returns the
    monitoring code, or None when there is no demo dataset or no upload files.
    """
    from pathlib import Path

    from webapp.state import ViewState
    from webapp.store.services import DEMO_SETTING

    token = services.store.get_setting(DEMO_SETTING)
    files = sorted(Path(folder).glob("*.csv")) if folder else []
    if not token or not files:
        return None
    done = services.store.get_setting(DEMO_MONITORING_SETTING)
    if done or not services.store.add_if_absent(DEMO_MONITORING_SETTING + "-claim", "1"):
        return done
    locked, _ = lock_view_state(services, ViewState(dataset=token), DEMO_MODEL_NAME, order_column="made_on")
    for path in files:
        services.reference_models.add_upload(locked.code, path.read_bytes(), path.name,
                                             uploaded_by="synthetic demo", order_column="made_on")
    services.store.set_setting(DEMO_MONITORING_SETTING, locked.code)
    return locked.code
