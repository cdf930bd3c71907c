"""The Airflow shell: operators over the pipeline, and the plugin (macros only)."""

from truthsieve.airflow.operators import (
    DecideAndPublishOperator,
    FitConsensusOperator,
    SendAlertsOperator,
    SourceIncentiveOperator,
    ValidateSourceOperator,
)

__all__ = [
    "DecideAndPublishOperator",
    "FitConsensusOperator",
    "SendAlertsOperator",
    "SourceIncentiveOperator",
    "ValidateSourceOperator",
]
