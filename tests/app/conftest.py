"""Fixtures for app tests: a fresh app on a temporary data directory."""

from pathlib import Path

import pandas as pd
import pytest
from sklearn.datasets import load_iris

from webapp.web.app import DEMO_SETTING, create_app
from webapp.config import AppConfig


@pytest.fixture
def app(tmp_path):
    # No demo reference model: these tests count the fits their own views cause.
    return create_app(AppConfig(data_dir=tmp_path / "data", demo_monitoring=None))


@pytest.fixture
def services(app):
    return app.server.config["ordinate.services"]


@pytest.fixture
def demo_token(services):
    return services.store.get_setting(DEMO_SETTING)


def iris_frame() -> pd.DataFrame:
    """Fisher's iris as shipped with scikit-learn, with a label and a species column."""
    iris = load_iris(as_frame=True)
    frame = iris.frame.drop(columns="target")
    frame.insert(0, "flower", [f"F{i:03d}" for i in range(150)])
    frame.insert(1, "species", iris.target_names[iris.target])
    return frame


@pytest.fixture
def iris_csv(tmp_path) -> Path:
    path = tmp_path / "iris.csv"
    iris_frame().to_csv(path, index=False)
    return path


@pytest.fixture
def iris_token(services, iris_csv):
    return services.store.add_bytes(iris_csv.read_bytes(), "iris.csv").token
