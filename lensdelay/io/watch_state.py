"""The watch's state in an embedded SQLite database, and the lock that keeps it single.

Tables: ``files`` (every alert file read, once), ``alerts`` (every alert matched to a
lens: its image, the probability, its transient), ``transients`` (per lens and transient:
the image it was first seen in, the notices' count, whether retracted) and ``notices``
(every notice issued). Each alert is committed on its own, after its notice's files are
written, so a watch killed at any point resumes without losing an alert or issuing a
notice twice (an alert already recorded is skipped; a file is marked read after its last
alert). An exclusive lock on ``watch.lock`` lets one watch at a time use a folder.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path

from lensdelay.errors import InputError

__all__ = ["STATE_FILE", "LOCK_FILE", "TransientState", "WatchState"]

STATE_FILE = "watch.sqlite"
LOCK_FILE = "watch.lock"
_SCHEMA = """
CREATE TABLE IF NOT EXISTS files (name TEXT PRIMARY KEY, read_at TEXT, alerts INTEGER,
    problems INTEGER);
CREATE TABLE IF NOT EXISTS alerts (alert_id TEXT, lens TEXT, image TEXT, probability REAL,
    transient TEXT, PRIMARY KEY (alert_id, lens));
CREATE TABLE IF NOT EXISTS transients (lens TEXT, transient TEXT, first_image TEXT,
    first_mjd REAL, sequence INTEGER, retracted INTEGER, PRIMARY KEY (lens, transient));
CREATE TABLE IF NOT EXISTS notices (ivorn TEXT PRIMARY KEY, lens TEXT, transient TEXT,
    role TEXT, sequence INTEGER, path TEXT);
"""


@dataclass(frozen=True)
class TransientState:
    """What the watch knows of one transient in one lens."""

    lens: str
    transient: str
    first_image: str
    first_mjd: float
    sequence: int
    retracted: bool


class WatchState:
    """The state database of a watch folder, held under its lock until :meth:`close`."""

    def __init__(self, folder):
        import fcntl

        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self._lock = open(self.folder / LOCK_FILE, "a+")  # noqa: SIM115 - held until close
        try:
            fcntl.flock(self._lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as err:
            self._lock.close()
            raise InputError(
                f"--out {self.folder} is in use by another watch (it holds {LOCK_FILE}); "
                "one watch per folder, got a second"
            ) from err
        self.db = sqlite3.connect(self.folder / STATE_FILE)
        self.db.executescript(_SCHEMA)
        self.db.commit()

    def close(self) -> None:
        """Close the database and release the lock."""
        self.db.close()
        self._lock.close()

    def file_read(self, name: str) -> bool:
        """Whether alert file ``name`` has been read to its end before."""
        row = self.db.execute("SELECT 1 FROM files WHERE name = ?", (name,)).fetchone()
        return row is not None

    def mark_file(self, name: str, read_at: str, alerts: int, problems: int) -> None:
        """Record ``name`` as read (after its last alert)."""
        with self.db:
            self.db.execute(
                "INSERT OR REPLACE INTO files VALUES (?, ?, ?, ?)",
                (name, read_at, alerts, problems),
            )

    def alert_seen(self, alert_id: str, lens: str) -> bool:
        """Whether this alert was already matched to this lens (and acted on)."""
        row = self.db.execute(
            "SELECT 1 FROM alerts WHERE alert_id = ? AND lens = ?", (alert_id, lens)
        ).fetchone()
        return row is not None

    def transient(self, lens: str, transient: str) -> TransientState | None:
        """The transient's state in ``lens``, or None when it is new there."""
        row = self.db.execute(
            "SELECT lens, transient, first_image, first_mjd, sequence, retracted FROM transients "
            "WHERE lens = ? AND transient = ?",
            (lens, transient),
        ).fetchone()
        return None if row is None else TransientState(*row[:5], bool(row[5]))

    def notices_of(self, lens: str, transient: str) -> list[str]:
        """The IVORNs of the notices issued for a transient, in order."""
        rows = self.db.execute(
            "SELECT ivorn FROM notices WHERE lens = ? AND transient = ? ORDER BY sequence",
            (lens, transient),
        ).fetchall()
        return [r[0] for r in rows]

    def record(self, alert, assignment, transient: str, notice=None, path=None, first=None):
        """Commit one alert: its match, the transient's state, the notice issued (if any).

        ``first`` is (image, mjd) for a transient seen for the first time.
        """
        with self.db:
            self.db.execute(
                "INSERT OR REPLACE INTO alerts VALUES (?, ?, ?, ?, ?)",
                (
                    alert.alert_id,
                    assignment.lens,
                    assignment.image,
                    assignment.probability,
                    transient,
                ),
            )
            if first is not None:
                self.db.execute(
                    "INSERT OR IGNORE INTO transients VALUES (?, ?, ?, ?, 0, 0)",
                    (assignment.lens, transient, first[0], first[1]),
                )
            if notice is not None:
                self.db.execute(
                    "INSERT OR REPLACE INTO notices VALUES (?, ?, ?, ?, ?, ?)",
                    (
                        notice["ivorn"],
                        assignment.lens,
                        transient,
                        notice["role"],
                        notice["sequence"],
                        str(path),
                    ),
                )
                self.db.execute(
                    "UPDATE transients SET sequence = ?, retracted = ? WHERE lens = ? AND "
                    "transient = ?",
                    (
                        notice["sequence"],
                        int(notice["role"] == "retraction"),
                        assignment.lens,
                        transient,
                    ),
                )
