"""The work area of one night: what each step writes for the later ones.

Files under the store's work folder (see :meth:`BatchStore.work`)::

    items.parquet, items.json           the validated items table; its check's summary (written last)
    sources/<folder>.parquet            one valid source's labels: ``item`` (int32 position in the
                                        items table), ``label`` (int8; int16 when K > 127); ``item_id`` strings instead
                                        when the items table is invalid
    sources/<folder>.json               that source's check summary (inputs with sha256, errors, notes)
    quarantine/<folder>.parquet         an invalid check's input bytes (``path``, ``data``, binary),
    quarantine/items.parquet            taken from the bytes validated, never re-read
    night/totals.npy                    the night's (m, K) summed costs (float64, ``.npy``), from
                                        fit_consensus; rows in item-id order
    night/global_risks.npy              every rule's unclipped global risk from those totals
    night/fit.json                      the consensus fit (rule, risk) and the normalised weight of
                                        each valid source (written last: the marker)
    incentives/<source_id>.json         one source's incentive analysis

A summary is written after its table, so a present summary means a whole step. Tables
are given to the store as functions: a work area held in memory (one process) never
serialises what no step reads back. The sources' tables are their sufficient
statistics: no step needs any other source's labels but ``fit_consensus`` (one at a
time, summed into the totals) and ``publish_night``.
"""

from __future__ import annotations

import io
import json
from dataclasses import fields
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.core.incentives import SourceIncentive
from truthsieve.core.ids import id_array
from truthsieve.exceptions import InputError
from truthsieve.pipeline.layout import batch_name
from truthsieve.pipeline.outputs import parquet_bytes
from truthsieve.pipeline.records import FileCheck, Intake, number_array, quarantine_bytes

ITEMS_TABLE, ITEMS_SUMMARY = "items.parquet", "items.json"
ITEMS_QUARANTINE = "quarantine/items.parquet"
NIGHT_TOTALS, NIGHT_RISKS, NIGHT_FIT = "night/totals.npy", "night/global_risks.npy", "night/fit.json"


class StepNotRunError(InputError):
    """A step read work that the step before it did not write in this run."""


def source_table(folder: str) -> str:
    return f"sources/{folder}.parquet"


def source_summary(folder: str) -> str:
    return f"sources/{folder}.json"


def source_quarantine(folder: str) -> str:
    return f"quarantine/{folder}.parquet"


def incentive_file(source_id: str) -> str:
    return f"incentives/{source_id}.json"


def _json(data) -> bytes:
    return json.dumps(data, sort_keys=True).encode()


def _read_parquet(data: bytes) -> pa.Table:
    return pq.ParquetFile(pa.BufferReader(data)).read()


def quarantine_blob(inbox: Path, check: FileCheck) -> bytes | None:
    """An invalid check's input bytes (those validated) as one small Parquet file."""
    if check.valid:
        return None
    copies = quarantine_bytes(inbox, check)
    paths = [p.encode("utf-8", "surrogateescape") for p in copies]
    return parquet_bytes(pa.table({"path": pa.array(paths, pa.binary()), "data": pa.array(list(copies.values()), pa.binary())}))


def write_items(store, batch_date: str, check: FileCheck, quarantine: bytes | None) -> None:
    if check.valid:
        frame = check.table  # this frame, whatever the check holds later
        store.write_work(batch_date, ITEMS_TABLE, lambda: parquet_bytes(pa.Table.from_pandas(frame, preserve_index=False)))
    if quarantine is not None:
        store.write_work(batch_date, ITEMS_QUARANTINE, quarantine)
    store.write_work(batch_date, ITEMS_SUMMARY, _json(check.summary()))  # last: the marker


def read_items(store, batch_date: str) -> FileCheck:
    summary = store.read_work(batch_date, ITEMS_SUMMARY)
    if summary is None:
        raise StepNotRunError("the items table was not checked in this run (step check_items)")
    data = store.read_work(batch_date, ITEMS_TABLE)
    return FileCheck.from_summary(json.loads(summary), None if data is None else _read_parquet(data).to_pandas())


def write_source(store, batch_date: str, folder: str, check: FileCheck, quarantine: bytes | None) -> None:
    if check.valid:
        labels = number_array(check.labels)  # int8; int16 when K > 127
        if check.item_codes is not None:
            table = pa.table({"item": number_array(check.item_codes.astype(np.int32)), "label": labels})
        else:
            table = pa.table({"item_id": check.item_ids, "label": labels})
        store.write_work(batch_date, source_table(folder), lambda: parquet_bytes(table))
    if quarantine is not None:
        store.write_work(batch_date, source_quarantine(folder), quarantine)
    store.write_work(batch_date, source_summary(folder), _json(check.summary()))


def read_source(store, batch_date: str, folder: str, item_ids: pa.Array | None) -> FileCheck:
    """One source's check; a valid one's labels as arrays (item codes into ``item_ids``, the
    items table's ids, or each label's item id when the items table is invalid)."""
    summary = store.read_work(batch_date, source_summary(folder))
    if summary is None:
        raise StepNotRunError(f"{folder} was not validated in this run")
    check = FileCheck.from_summary(json.loads(summary))
    data = store.read_work(batch_date, source_table(folder))
    if data is not None:
        table = _read_parquet(data)
        check.labels = table.column("label").to_numpy()
        if "item" in table.column_names:
            check.item_codes, check.id_table = table.column("item").to_numpy(), item_ids
        else:
            check.item_ids = table.column("item_id").combine_chunks()
    return check


def read_intake(store, batch_date: str) -> Intake:
    """The night's validated intake, rebuilt from the work area only."""
    items = read_items(store, batch_date)
    item_ids = id_array(items.table["item_id"]) if items.valid else None
    intake = Intake(batch_date, items)
    for folder in store.source_folders(batch_date):
        intake.sources.append(read_source(store, batch_date, folder, item_ids))
    return intake


def quarantine_copies(store, intake: Intake) -> dict[str, bytes]:
    """``quarantine/<inbox-relative path inside the night>`` -> the bytes validated."""
    names = ([ITEMS_QUARANTINE] if not intake.items.valid else []) + [
        source_quarantine(folder) for folder, check in zip(store.source_folders(intake.batch_date), intake.sources) if not check.valid
    ]
    copies = {}
    for name in names:
        data = store.read_work(intake.batch_date, name)
        if data is None:
            continue
        table = _read_parquet(data)
        for path, content in zip(table.column("path").to_pylist(), table.column("data").to_pylist()):
            relative = Path(path.decode("utf-8", "surrogateescape")).relative_to(batch_name(intake.batch_date))
            copies[f"quarantine/{relative.as_posix()}"] = content
    return copies


def valid_source_folders(store, batch_date: str) -> list[tuple[str, str]]:
    """(source_id, folder) of every source validated as valid in this run, by summary alone."""
    found = []
    for folder in store.source_folders(batch_date):
        summary = store.read_work(batch_date, source_summary(folder))
        if summary is None:
            raise StepNotRunError(f"{folder} was not validated in this run")
        check = json.loads(summary)
        if not check["errors"]:
            found.append((check["source_id"], folder))
    return found


def read_source_codes(store, batch_date: str, folder: str) -> tuple[np.ndarray, np.ndarray]:
    """One valid source's labels as (item positions in the items table, class indices)."""
    data = store.read_work(batch_date, source_table(folder))
    if data is None:
        raise StepNotRunError(f"the labels of {folder} were not validated in this run")
    table = _read_parquet(data)
    return table.column("item").to_numpy(), table.column("label").to_numpy()


def _npy(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array, allow_pickle=False)
    return buffer.getvalue()


def write_night_fit(store, batch_date: str, totals: np.ndarray, global_risks: np.ndarray, fit: dict) -> None:
    """The consensus step's result: the summed costs, the rules' global risks, the fit."""
    store.write_work(batch_date, NIGHT_TOTALS, lambda: _npy(totals))
    store.write_work(batch_date, NIGHT_RISKS, lambda: _npy(global_risks))
    store.write_work(batch_date, NIGHT_FIT, _json(fit))  # last: the marker


def read_night_fit(store, batch_date: str) -> tuple[np.ndarray, np.ndarray, dict]:
    """(totals, global risks, fit record) as :func:`write_night_fit` wrote them."""
    fit = store.read_work(batch_date, NIGHT_FIT)
    if fit is None:
        raise StepNotRunError("the consensus was not fitted in this run (step fit_consensus)")
    arrays = [np.load(io.BytesIO(store.read_work(batch_date, name)), allow_pickle=False) for name in (NIGHT_TOTALS, NIGHT_RISKS)]
    return arrays[0], arrays[1], json.loads(fit)


_INCENTIVE_FIELDS = tuple(f.name for f in fields(SourceIncentive))


def incentive_record(result: SourceIncentive) -> dict:
    """The incentive's fields as a dict: ``dataclasses.asdict`` without its deep copy (every
    field is a scalar, which a deep copy returns as is)."""
    return {name: getattr(result, name) for name in _INCENTIVE_FIELDS}


def write_incentive(store, batch_date: str, result: SourceIncentive) -> None:
    store.write_work(batch_date, incentive_file(result.source_id), _json(incentive_record(result)))


def read_incentives(store, batch_date: str, source_ids) -> list[SourceIncentive]:
    results = []
    for source_id in source_ids:
        data = store.read_work(batch_date, incentive_file(source_id))
        if data is None:
            raise StepNotRunError(f"the incentives of {source_id} were not analysed in this run")
        results.append(SourceIncentive(**json.loads(data)))
    return results
