"""Airflow operators: thin shells over :mod:`truthsieve.pipeline`.

Each operator resolves its (templated) locations, calls one pipeline function and
turns the outcome into the task's fate (:func:`classify`): transient I/O faults fail
with retry; bad input, configuration errors and bugs fail at once (``AirflowFailException``).
Data moves through the night's work area (:mod:`truthsieve.pipeline.work_files`) on
storage every worker sees (see :mod:`truthsieve.airflow.storage`); XCom carries small
summaries only. Each operator runs exactly one step of :mod:`truthsieve.pipeline.night`.
Nothing heavy is imported until ``execute`` runs.
"""

from __future__ import annotations

import os
from collections.abc import Sequence

from airflow.sdk import BaseOperator
from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException

from truthsieve.airflow import storage


#: I/O faults a retry can cure; other OSErrors (a missing file, no permission) are permanent.
PERMANENT_OS_ERRORS = (FileNotFoundError, PermissionError, IsADirectoryError, NotADirectoryError)


def classify(call):
    """Run ``call``; turn every error that a retry cannot cure into ``AirflowFailException``.

    Retried (re-raised as is): transient I/O (``OSError`` such as ``ConnectionError``,
    ``TimeoutError``, an SMTP failure) other than :data:`PERMANENT_OS_ERRORS`, and
    ``BatchLockedError``. Failed at once: bad input and configuration, bugs, anything else.
    """
    from truthsieve.exceptions import BatchLockedError

    try:
        return call()
    except (AirflowFailException, AirflowSkipException):
        raise
    except BatchLockedError:
        raise
    except OSError as error:
        if isinstance(error, PERMANENT_OS_ERRORS):
            raise AirflowFailException(f"{type(error).__name__}: {error}") from error
        raise
    except Exception as error:
        raise AirflowFailException(f"{type(error).__name__}: {error}") from error


class _BatchOperator(BaseOperator):
    """Shared arguments of every truthsieve operator.

    :param inbox: inbox root: a path or URI (templated).
    :param batch_date: batch date, ``YYYY-MM-DD`` (templated).
    :param config_path: YAML configuration: a path or URI (templated).
    :param out: output root: a path or URI (templated).
    """

    template_fields: Sequence[str] = ("inbox", "batch_date", "config_path", "out")

    def __init__(self, *, inbox: str, batch_date: str, config_path: str, out: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.inbox = inbox
        self.batch_date = batch_date
        self.config_path = config_path
        self.out = out

    def execute(self, context):
        """:meth:`run` with its errors classified by :func:`classify`."""
        return classify(lambda: self.run(context))

    def run(self, context):
        raise NotImplementedError

    def load_config(self):
        from truthsieve.pipeline.config import load_config

        if storage.is_local(self.config_path):
            return load_config(storage.local_path(self.config_path))  # refuses a relative URI
        return load_config(storage.location(self.config_path))

    def store(self):
        """The night's :class:`~truthsieve.pipeline.store.BatchStore` (refuses relative local URIs)."""
        return storage.store_for(self.inbox, self.out)


class CheckItemsOperator(_BatchOperator):
    """Validate the night's items table once (step ``check_items``), before the mapped
    source validations read it from the work area."""

    def run(self, context):
        from truthsieve.pipeline import night

        check = night.check_items(self.store(), self.batch_date, self.load_config())
        return {"valid": check.valid, "errors": len(check.errors)}


class ValidateSourceOperator(_BatchOperator):
    """Validate one source folder of a night (step ``validate_source``; mappable over ``source_folder``).

    :param source_folder: the ``source_id=<id>`` folder name (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_folder")

    def __init__(self, *, source_folder: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_folder = source_folder

    def run(self, context):
        from truthsieve.pipeline import night

        check = night.validate_source(self.store(), self.batch_date, self.source_folder, self.load_config())
        return {"source_id": check.source_id, "valid": check.valid, "errors": len(check.errors)}


class FitConsensusOperator(_BatchOperator):
    """Fit the consensus rule (step ``fit_consensus``); returns the rule and its risk."""

    def run(self, context):
        from truthsieve.pipeline import night

        fit = night.fit_consensus(self.store(), self.batch_date, self.load_config())
        if fit is None:
            raise AirflowSkipException("no valid items table or no valid source: nothing to fit")
        return fit.summary()


class SourceIncentiveOperator(_BatchOperator):
    """Gain bracket and cheapest lie of one source under the consensus fit (step
    ``analyse_source``; mappable over ``source_id``).

    :param source_id: the source to analyse (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_id")

    def __init__(self, *, source_id: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_id = source_id

    def run(self, context):
        from truthsieve.pipeline import night

        result = night.analyse_source(self.store(), self.batch_date, self.load_config(), self.source_id)
        return {"source_id": self.source_id, "gain_lower": result.gain_lower, "gain_exact": result.gain_exact}


class DecideAndPublishOperator(_BatchOperator):
    """Decide the night and publish its outputs (step ``publish_night``), with the draw key
    read here from ``TRUTHSIEVE_DRAW_KEY``; returns route, flagged sources and where."""

    def run(self, context):
        from truthsieve.pipeline import night

        draw_key = night.draw_key_from_environment(os.environ)
        return night.publish_night(self.store(), self.batch_date, self.load_config(), draw_key).summary()
