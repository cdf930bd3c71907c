"""The Airflow shell: operators over the pipeline, and the plugin (macros only)."""

from truthsieve.airflow.alerting import SendAlertsOperator
from truthsieve.airflow.operators import (
    CheckItemsOperator,
    DecideAndPublishOperator,
    FitConsensusOperator,
    SourceIncentiveOperator,
    ValidateSourceOperator,
)

__all__ = [
    "CheckItemsOperator",
    "DecideAndPublishOperator",
    "FitConsensusOperator",
    "SendAlertsOperator",
    "SourceIncentiveOperator",
    "ValidateSourceOperator",
]
