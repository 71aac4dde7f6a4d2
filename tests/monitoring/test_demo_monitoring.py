"""The synthetic monitoring demo: reproducible files, and the planted drift is what the rules catch.

The demo data are invented (demo_data/generate_monitoring.py); here they are a
fixture of the demo, not a reference for the numerics (those are checked in
test_monitoring_analysis.py against scipy and a direct loop).
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

from webapp.analysis.monitoring import run_rule_hits
from webapp.config import AppConfig
from webapp.store.services import create_services, ensure_demo
from webapp.ui.reference_locking import DEMO_MODEL_NAME, seed_demo_monitoring

DEMO = Path(__file__).resolve().parents[2] / "demo_data"


def _generator():
    spec = importlib.util.spec_from_file_location("ordinate_demo_monitoring", DEMO / "generate_monitoring.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def test_the_shipped_uploads_are_regenerated_byte_for_byte(tmp_path):
    gen = _generator()
    written = gen.write(tmp_path)
    assert [p.name for p in written] == sorted(p.name for p in (DEMO / "monitoring").glob("*.csv"))
    for path in written:
        assert path.read_bytes() == (DEMO / "monitoring" / path.name).read_bytes()
        assert "synthetic" in path.name


@pytest.fixture(scope="module")
def seeded(tmp_path_factory):
    services = create_services(AppConfig(data_dir=tmp_path_factory.mktemp("demo")))
    ensure_demo(services)
    code = seed_demo_monitoring(services, DEMO / "monitoring")
    return services, code


def test_the_demo_is_seeded_once_with_every_weekly_upload_in_production_order(seeded):
    services, code = seeded
    locked = services.reference_models.get(code)
    assert locked.name == DEMO_MODEL_NAME and locked.version == 1
    assert seed_demo_monitoring(services, DEMO / "monitoring") == code  # a second worker adds nothing
    assert len(services.reference_models.all()) == 1
    uploads = services.reference_models.uploads(code)
    assert [u.file_name for u in uploads] == sorted(p.name for p in (DEMO / "monitoring").glob("*.csv"))
    frame = services.reference_models.frame(code)
    assert list(frame["order"]) == sorted(frame["order"])  # ISO dates sort as text


def test_the_run_rule_catches_the_planted_drift_and_nothing_before_it(seeded):
    services, code = seeded
    gen = _generator()
    locked = services.reference_models.get(code)
    frame = services.reference_models.frame(code)
    drift_start = int(frame.index[frame["sample"].isin(_drifting_batches(gen))].min())
    hits = run_rule_hits(frame["q"], limit=float(frame["q_limit"].iloc[0]), median=locked.reference.q_median,
                         statistic="q")
    runs = [h for h in hits if h.rule == "run-above-median"]
    assert runs and all(h.first >= drift_start for h in runs)
    assert runs[0].last == len(frame) - 1  # the drift lasts to the last upload
    # The planted over-fermented batch of week 13 (24-28 March 2025) has the highest T², beyond the limit.
    worst = frame.loc[frame["t2"].idxmax()]
    assert bool(worst["t2_beyond"]) and "2025-03-24" <= worst["order"][:10] <= "2025-03-28"


def _drifting_batches(gen) -> set[str]:
    return {b for week, table in zip(gen.WEEKS, gen.simulate()) if week >= gen.DRIFT_FROM_WEEK
            for b in table["batch_id"]}


def test_a_seed_cut_off_half_way_is_finished_by_the_next_start_and_a_busy_seed_is_left_alone(tmp_path):
    from webapp.state import ViewState
    from webapp.store.file_lock import FileLock
    from webapp.ui.reference_locking import lock_view_state

    services = create_services(AppConfig(data_dir=tmp_path / "data"))
    ensure_demo(services)
    token = services.store.get_setting("demo-token")
    files = sorted((DEMO / "monitoring").glob("*.csv"))
    # A worker killed after locking the model and adding three uploads: no completion note was written.
    locked, _ = lock_view_state(services, ViewState(dataset=token), DEMO_MODEL_NAME, order_column="made_on")
    for path in files[:3]:
        services.reference_models.add_upload(locked.code, path.read_bytes(), path.name, order_column="made_on")
    busy = FileLock(services.reference_models.root / "demo-seed.lock")
    assert busy.acquire(timeout=0)
    try:
        assert seed_demo_monitoring(services) is None  # another worker is seeding: this one goes on starting
    finally:
        busy.release()
    assert seed_demo_monitoring(services) == locked.code  # the default folder: demo_data/monitoring
    assert [u.file_name for u in services.reference_models.uploads(locked.code)] == [p.name for p in files]
    assert len(services.reference_models.all()) == 1


def test_the_app_starts_with_the_demo_reference_model_and_without_it_when_told(tmp_path):
    from webapp.web.app import create_app

    services = create_app(AppConfig(data_dir=tmp_path / "a")).server.config["ordinate.services"]
    (locked,) = services.reference_models.all()
    assert locked.name == DEMO_MODEL_NAME and len(services.reference_models.uploads(locked.code)) == 10
    bare = create_app(AppConfig(data_dir=tmp_path / "b", demo_monitoring=None)).server.config["ordinate.services"]
    assert bare.reference_models.all() == []
