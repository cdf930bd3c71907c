"""Where a run may read and write: checks made once, before any work.

The output root must never equal, contain or lie inside the inbox: publishing renames
``<out>/batch_date=D`` away, and with ``--out`` equal to ``--inbox`` that would be the
night's input folder. Configured features (and, for the listed class, some ``rule__*``
column) must exist in at least one items table of the nights asked for; otherwise the
configuration is wrong, not the data. :func:`check_configured_columns` is that check as the
rule-class registry drives it; the command line (for the nights of a run) and
``night.check_items`` (for the one night of an Airflow run) both call it.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable, Sequence
from pathlib import Path

from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.layout import ITEMS_FILE, batch_dir, inside


def check_out_location(inbox: str | Path, out: str | Path) -> Path:
    """Refuse an output root that overlaps the inbox or cannot be written; create it.

    Both paths are compared after resolving every link. Returns the output root.

    :raises ConfigError: ``out`` equals, contains or lies inside ``inbox``; ``out`` is a
        file; it cannot be created; or it cannot be written.
    """
    inbox, out = Path(inbox), Path(out)
    real_inbox, real_out = Path(os.path.realpath(inbox)), Path(os.path.realpath(out))
    if real_out == real_inbox:
        raise ConfigError(f"--out {out} is the inbox {inbox}; outputs must go elsewhere")
    if real_out.is_relative_to(real_inbox):
        raise ConfigError(f"--out {out} lies inside the inbox {inbox}; outputs must go elsewhere")
    if real_inbox.is_relative_to(real_out):
        raise ConfigError(f"--out {out} contains the inbox {inbox}; outputs must go elsewhere")
    if out.exists() and not out.is_dir():
        raise ConfigError(f"--out {out} is a file, not a folder")
    try:
        out.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryFile(dir=out):
            pass
    except OSError as error:
        raise ConfigError(f"--out {out} cannot be created or written: {error.strerror or error}") from None
    return out


def _schemas(inbox: Path, dates: Sequence[str]) -> list[list[str]]:
    """The column names of every readable items table of ``dates`` inside the inbox (footers only)."""
    import pyarrow.parquet as pq  # here: the command line starts without pyarrow

    found = []
    for date in dates:
        path = batch_dir(inbox, date) / ITEMS_FILE
        if not path.is_file() or not inside(path, inbox):
            continue
        try:
            found.append(pq.read_schema(os.path.realpath(path)).names)
        except Exception:  # noqa: BLE001 - any unreadable footer: the night's own screen reports it
            continue
    return found


def _nights(dates: Sequence[str]) -> str:
    return dates[0] if len(dates) == 1 else f"{dates[0]} to {dates[-1]}"


def check_features_present(inbox: str | Path, dates: Sequence[str], features: Iterable[str]) -> None:
    """Refuse configured features that no items table of ``dates`` has.

    Reads only Parquet footers (schemas), only of tables inside the inbox. Nights whose
    items table is missing or unreadable say nothing either way (their own screening
    records that); when no night has a readable schema, nothing is refused.

    :raises ConfigError: naming ``rule_class.features`` and each column no night has.
    """
    inbox, features = Path(inbox), list(features)
    if not features:
        return
    schemas = _schemas(inbox, dates)
    seen = {name for names in schemas for name in names}
    missing = [f for f in features if f not in seen]
    if schemas and missing:
        raise ConfigError(
            f"rule_class.features: column{'s' if len(missing) > 1 else ''} {', '.join(missing)} "
            f"in no items table of {_nights(dates)}; check the configuration's spelling"
        )


def check_rule_columns_present(inbox: str | Path, dates: Sequence[str]) -> None:
    """Refuse ``rule_class.kind: listed`` when no items table of ``dates`` has a ``rule__*`` column.

    The listed class names no columns, so when no night offers any candidate rule the
    configuration is what is wrong (as with a feature no items table has). A night that
    lacks them while another night of the range has them is that night's input error
    (``table_lacks_column``, its items table quarantined). Same reading rules as
    :func:`check_features_present`.

    :raises ConfigError: naming ``rule_class.kind`` and the nights.
    """
    from truthsieve.core.rule_class import RULE_COLUMN_PREFIX  # here: the command line starts without numpy

    schemas = _schemas(Path(inbox), dates)
    if schemas and not any(name.startswith(RULE_COLUMN_PREFIX) for names in schemas for name in names):
        raise ConfigError(
            f"rule_class.kind 'listed': no items table of {_nights(dates)} has a rule__<name> column "
            "(the candidate rules); add them to items.parquet or choose another rule class"
        )


def check_configured_columns(inbox: str | Path, dates: Sequence[str], config) -> None:
    """Refuse, as a configuration error, columns the rule class's registry entry needs and no
    items table of ``dates`` has: the configured features (``needs_features``) or any
    ``rule__*`` column (``uses_rule_columns``). Reads Parquet footers only.

    :raises ConfigError: one line, from :func:`check_features_present` or
        :func:`check_rule_columns_present`; or the kind is not in the registry.
    """
    from truthsieve.core.rules import RULE_CLASSES  # here: the command line starts without numpy

    entry = RULE_CLASSES.get(config.rule_class.kind)
    if entry is None:  # the config validates the kind; a registry changed since is still one line
        raise ConfigError(RULE_CLASSES.unknown(config.rule_class.kind))
    if entry.needs_features:
        check_features_present(inbox, dates, config.rule_class.features)
    if entry.uses_rule_columns:
        check_rule_columns_present(inbox, dates)
