"""A private AIRFLOW_HOME on SQLite for the Airflow tests, set before Airflow is imported."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
_home = tempfile.mkdtemp(prefix="truthsieve-airflow-")
os.environ.update(
    {
        "AIRFLOW_HOME": _home,
        "AIRFLOW__CORE__LOAD_EXAMPLES": "False",
        "AIRFLOW__CORE__DAGS_FOLDER": str(REPO / "dags"),
        "AIRFLOW__CORE__UNIT_TEST_MODE": "False",
        "AIRFLOW__DATABASE__SQL_ALCHEMY_CONN": f"sqlite:///{_home}/airflow.db",
    }
)


@pytest.fixture(scope="session")
def airflow_db():
    from airflow.utils import db

    db.initdb()
    return _home
