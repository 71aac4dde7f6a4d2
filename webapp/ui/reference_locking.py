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


#: Store setting naming the demo's locked reference model once it is complete.
DEMO_MONITORING_SETTING = "demo-monitoring-code"
DEMO_MODEL_NAME = "Oat dessert release model (synthetic demo)"


def seed_demo_monitoring(services, folder=None) -> str | None:
    """Lock the demo dataset's default view as a reference model and add the demo's weekly uploads.

    ``folder``: the upload files (``*.csv``, added in name order); by default the
    ``monitoring`` folder beside the demo dataset. Once per data directory: the
    worker that gets the lock does the work while the others go on starting
    (None); a worker killed half-way leaves the lock free, and the next start
    finishes the same model (uploads already added by file name are skipped).
    Returns the monitoring code, or None when there is no demo dataset or no
    upload files, or another worker is seeding.
    """
    from pathlib import Path

    from webapp.state import ViewState
    from webapp.store.file_lock import FileLock
    from webapp.store.services import DEMO_SETTING

    store, models = services.store, services.reference_models
    token = store.get_setting(DEMO_SETTING)
    demo = services.config.demo_dataset
    if folder is None and demo is not None:
        folder = Path(demo).parent / "monitoring"
    files = sorted(Path(folder).glob("*.csv")) if folder else []
    if not token or not files:
        return None
    done = store.get_setting(DEMO_MONITORING_SETTING)
    if done and models.get(done):
        return done
    lock = FileLock(models.root / "demo-seed.lock")
    if not lock.acquire(timeout=0):
        return None
    try:
        done = store.get_setting(DEMO_MONITORING_SETTING)
        if done and models.get(done):
            return done
        started = [m for m in models.versions(DEMO_MODEL_NAME) if m.dataset_token == token]
        locked = started[-1] if started else \
            lock_view_state(services, ViewState(dataset=token), DEMO_MODEL_NAME, order_column="made_on")[0]
        added = {u.file_name for u in models.uploads(locked.code)}
        for path in files:
            if path.name not in added:
                models.add_upload(locked.code, path.read_bytes(), path.name, uploaded_by="synthetic demo",
                                  order_column="made_on")
        store.set_setting(DEMO_MONITORING_SETTING, locked.code)
        return locked.code
    finally:
        lock.release()
