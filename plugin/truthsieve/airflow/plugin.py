"""The Airflow plugin: one macro that renders a batch folder path. Operators are plain imports."""

from __future__ import annotations

from airflow.plugins_manager import AirflowPlugin


def batch_path(root: str, batch_date: str) -> str:
    """``<root>/batch_date=<batch_date>``: use as ``{{ macros.truthsieve.batch_path(params.inbox, ds) }}``."""
    return f"{root.rstrip('/')}/batch_date={batch_date}"


class TruthsievePlugin(AirflowPlugin):
    name = "truthsieve"
    macros = [batch_path]
