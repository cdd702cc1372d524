"""Reading survey alert files: Avro object containers, CSV with a header, JSON lines.

The suffix says which (``.avro``, ``.csv``, ``.jsonl``; CONVENTIONS.md, "Survey alerts").
A watch must keep running whatever arrives, so nothing here raises on bad content: a file
that cannot be read (truncated, not of its kind) yields no alerts and one problem line;
a record that is not an alert is skipped, and the problems of a file are grouped into
one line per kind (a thousand records of an unknown schema are one line, not a thousand).
"""

from __future__ import annotations

import csv
import json
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from lensdelay.model.alerts import Alert, AlertError, alert_from_record

__all__ = ["ALERT_SUFFIXES", "AlertBatch", "read_alert_file"]

#: The alert file kinds, by suffix.
ALERT_SUFFIXES = (".avro", ".csv", ".jsonl")


@dataclass(frozen=True)
class AlertBatch:
    """The alerts of one file and the problems met reading it (one line each)."""

    path: str
    alerts: tuple[Alert, ...] = ()
    problems: tuple[str, ...] = field(default=())
    records: int = 0


def _records(path: Path):
    """The file's records as mappings (raises on a file that cannot be read)."""
    suffix = path.suffix.lower()
    if suffix == ".avro":
        import fastavro

        with path.open("rb") as handle:
            # read every record before using any: a truncated container fails here,
            # and the file is then skipped whole rather than half used
            return list(fastavro.reader(handle))
    if suffix == ".csv":
        with path.open(newline="") as handle:
            return list(csv.DictReader(handle))
    if suffix == ".jsonl":
        out = []
        with path.open() as handle:
            for number, line in enumerate(handle, start=1):
                if line.strip():
                    try:
                        out.append(json.loads(line))
                    except ValueError:
                        out.append(_Unreadable(f"line {number} is not JSON"))
        return out
    raise ValueError(f"suffix must be one of {', '.join(ALERT_SUFFIXES)}, got {suffix!r}")


class _Unreadable:
    """A line of a JSON-lines file that is not JSON (a record to skip, with why)."""

    def __init__(self, why: str):
        self.why = why


def read_alert_file(path, fields: dict | None = None) -> AlertBatch:
    """The alerts of one file; ``fields`` renames fields (meaning -> the file's name)."""
    path = Path(path)
    try:
        records = _records(path)
    except Exception as err:  # noqa: BLE001 - any failure to read is one logged line
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        return AlertBatch(str(path), problems=(f"{path}: unreadable, skipped ({reason})",))
    alerts, problems = [], Counter()
    for record in records:
        if isinstance(record, _Unreadable):
            problems[record.why] += 1
            continue
        try:
            alerts.append(alert_from_record(record, fields))
        except AlertError as err:
            problems[str(err)] += 1
    lines = tuple(
        f"{path}: {count} record{'s' if count > 1 else ''} skipped: {why}"
        for why, count in problems.items()
    )
    return AlertBatch(str(path), tuple(alerts), lines, len(records))
