"""The Airflow shell: operators over the pipeline, the review-night recorder, and the plugin (macros only)."""

from truthsieve.airflow.alerting import SendAlertsOperator
from truthsieve.airflow.operators import (
    CheckItemsOperator,
    DecideAndPublishOperator,
    FitConsensusOperator,
    SourceIncentiveOperator,
    ValidateSourceOperator,
)
from truthsieve.airflow.review import RecordVerdictOperator

__all__ = [
    "CheckItemsOperator",
    "DecideAndPublishOperator",
    "FitConsensusOperator",
    "RecordVerdictOperator",
    "SendAlertsOperator",
    "SourceIncentiveOperator",
    "ValidateSourceOperator",
]
