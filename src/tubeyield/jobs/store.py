"""The sweep result store: SQLite, one row per scenario, committed as each result arrives.

- A kill at any moment loses at most the scenarios in flight: every row is its own transaction (WAL journal, so a
  crashed process never leaves a half-written row; the kernel keeps committed pages).
- Two sweeps on one store are refused: a sweep holds an exclusive `flock` on `<store>.lock` for as long as it runs;
  the kernel releases it when the process ends, however it ends (even SIGKILL), so a stale lock cannot block a resume.
- The store remembers the study it belongs to (fingerprint and sources); resuming with another study is refused.
- A damaged store (SQLite's quick_check fails, or it is not a tubeyield store) is refused before anything is written
  to it, and left as it is.
- Two kinds of failure are told apart: `failed` (the scenario's own numerics: no start converged, the simulation
  failed) and `lost` (the worker running it died, or the cluster lost the task, more than the retries allow). A
  resume re-runs lost scenarios; failed ones only when asked (`--retry-failed`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import fcntl
import json
import os
import sqlite3
from pathlib import Path

from tubeyield.errors import StudyError

SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS scenarios (
    id TEXT PRIMARY KEY,
    idx INTEGER NOT NULL,
    inputs TEXT NOT NULL,          -- JSON: study path -> SI value
    status TEXT NOT NULL,          -- tubeyield.status: optimal | unverified | infeasible | failed | lost | ...
    goal REAL,
    decisions TEXT,                -- JSON: decision -> SI value (profiles: list)
    metrics TEXT,                  -- JSON: metric -> value (display units)
    limits TEXT,                   -- JSON: list of limit records
    detail TEXT,                   -- JSON: anything else the run mode keeps (front points, candidates)
    iterations INTEGER,
    seconds REAL,
    start TEXT,                    -- warm (nearest finished scenario) | cold (multistart)
    worker TEXT,
    error TEXT,
    finished TEXT NOT NULL
);
"""


class StoreLocked(StudyError):
    pass


COLUMNS = ("id", "idx", "inputs", "status", "goal", "decisions", "metrics", "limits", "detail", "iterations",
           "seconds", "start", "worker", "error", "finished")


class Store:
    def __init__(self, path, *, lock: bool = True):
        self.path = Path(path)
        self._lock_fd = None
        if self.path.is_dir():
            raise StudyError(str(self.path), "a store file (.sqlite); this is a folder")
        existing = self.path.is_file() and self.path.stat().st_size > 0
        if lock:
            self._acquire_lock()
        try:
            self.db = sqlite3.connect(str(self.path), timeout=30.0, isolation_level=None)
            if existing:
                self._check_integrity()
            if lock:
                self.db.execute("PRAGMA journal_mode=WAL")
                self.db.execute("PRAGMA synchronous=NORMAL")
                self.db.executescript(SCHEMA)
        except sqlite3.DatabaseError as exc:
            self.close()
            raise StudyError(str(self.path), f"a sweep store in good order; it cannot be read ({exc}). It is left "
                                             "untouched: start a new --store") from None
        except BaseException:
            self.close()
            raise

    def _check_integrity(self) -> None:
        """Refuse a damaged store or another database before anything is written to it."""
        result = self.db.execute("PRAGMA quick_check").fetchall()
        if [r[0] for r in result] != ["ok"]:
            problem = " ".join(str(result[0][0]).split())[:200]
            raise sqlite3.DatabaseError(f"SQLite's integrity check: {problem}")
        tables = {r[0] for r in self.db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if not {"meta", "scenarios"} <= tables:
            raise sqlite3.DatabaseError("not a tubeyield sweep store (no meta and scenarios tables)")
        columns = {r[1] for r in self.db.execute("PRAGMA table_info(scenarios)")}
        if not set(COLUMNS) <= columns:
            raise sqlite3.DatabaseError("not a tubeyield sweep store (its scenarios table lacks columns)")

    # -------------------------------------------------------------------------------------------------- locking

    def _acquire_lock(self) -> None:
        lock_path = self.path.with_name(self.path.name + ".lock")
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise StoreLocked(str(self.path), "a store no other sweep is using; another sweep holds its lock "
                                              f"({lock_path}). Wait for it to finish or use another --store") from None
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        self._lock_fd = fd

    def close(self) -> None:
        if getattr(self, "db", None) is not None:
            self.db.close()
            self.db = None
        if self._lock_fd is not None:
            fcntl.flock(self._lock_fd, fcntl.LOCK_UN)
            os.close(self._lock_fd)
            self._lock_fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    # ----------------------------------------------------------------------------------------------------- meta

    def meta(self) -> dict:
        return {k: v for k, v in self.db.execute("SELECT key, value FROM meta")}

    def bind(self, fingerprint: str, study_text: str, run: str, resume: bool) -> None:
        """Tie the store to a study. A store of another study is refused; an existing one needs --resume."""
        meta = self.meta()
        n = self.count()
        if meta.get("fingerprint") and meta["fingerprint"] != fingerprint:
            raise StudyError(str(self.path), "a store of this study; it holds results of another study or another "
                                             "version of it (start a new --store)")
        if n and not resume:
            raise StudyError(str(self.path), f"an empty or new store, or --resume; it already holds {n} scenario(s) "
                                             "of this study (add --resume to run only the missing ones)")
        with self._writing():
            for k, v in (("fingerprint", fingerprint), ("study", study_text), ("run", run)):
                self.db.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (k, v))
            self.db.execute("INSERT OR IGNORE INTO meta VALUES ('created', ?)", (_now(),))

    # -------------------------------------------------------------------------------------------------- results

    def done_ids(self) -> set[str]:
        return {r[0] for r in self.db.execute("SELECT id FROM scenarios")}

    def ids_with_status(self, statuses) -> set[str]:
        marks = ", ".join("?" * len(statuses))
        return {r[0] for r in self.db.execute(f"SELECT id FROM scenarios WHERE status IN ({marks})", tuple(statuses))}

    def forget(self, ids) -> None:
        """Drop the rows of scenarios about to run again (lost ones on a resume, failed ones when asked)."""
        with self._writing():
            self.db.executemany("DELETE FROM scenarios WHERE id = ?", [(i,) for i in ids])

    @contextlib.contextmanager
    def _writing(self):
        """One transaction. A full disk or a store that turned read-only ends the sweep in one line; every row
        committed before stays."""
        try:
            with self.db:
                yield
        except sqlite3.OperationalError as exc:
            raise OSError(errno.EIO, f"cannot write to the store ({exc}); every finished scenario is kept: make "
                                     "room and run again with --resume", str(self.path)) from None

    def count(self) -> int:
        return int(self.db.execute("SELECT COUNT(*) FROM scenarios").fetchone()[0])

    def put(self, row: dict) -> None:
        """Insert one scenario's result and commit. A row already present (a task that ran twice, e.g. after a
        worker was lost) is kept as it was: the first result stands."""
        cols = COLUMNS
        values = [row.get("id"), row.get("idx"), json.dumps(row.get("inputs", {})), row.get("status", "failed"),
                  row.get("goal"), _js(row.get("decisions")), _js(row.get("metrics")), _js(row.get("limits")),
                  _js(row.get("detail")), row.get("iterations"), row.get("seconds"), row.get("start"),
                  row.get("worker"), row.get("error"), _now()]
        with self._writing():
            self.db.execute(f"INSERT OR IGNORE INTO scenarios ({', '.join(cols)}) VALUES "
                            f"({', '.join('?' * len(cols))})", values)

    def rows(self) -> list[dict]:
        cur = self.db.execute("SELECT * FROM scenarios ORDER BY idx")
        names = [d[0] for d in cur.description]
        out = []
        for r in cur:
            row = dict(zip(names, r))
            for k in ("inputs", "decisions", "metrics", "limits", "detail"):
                row[k] = json.loads(row[k]) if row[k] else None
            out.append(row)
        return out

    def table(self):
        """One row per scenario with inputs, decisions and metrics as columns (pandas)."""
        import pandas as pd
        flat = []
        for r in self.rows():
            row = {"id": r["id"], "index": r["idx"], "status": r["status"], "goal": r["goal"],
                   "iterations": r["iterations"], "seconds": r["seconds"], "start": r["start"], "error": r["error"]}
            row.update({f"in:{k}": v for k, v in (r["inputs"] or {}).items()})
            row.update({f"decision:{k}": (v if not isinstance(v, list) else None) for k, v in (r["decisions"] or {}).items()})
            row.update({k: v for k, v in (r["metrics"] or {}).items()})
            flat.append(row)
        return pd.DataFrame(flat)


def open_existing(path) -> Store:
    """Open a store for reading (no lock: reading while a sweep runs is safe with WAL)."""
    path = Path(path)
    if not path.is_file():
        raise StudyError(str(path), "an existing sweep store (a .sqlite file written by 'tubeyield sweep')")
    try:
        store = Store(path, lock=False)
        store.meta()
    except sqlite3.DatabaseError as exc:
        raise StudyError(str(path), f"a sweep store written by tubeyield ({exc})") from None
    return store


def _js(v):
    return None if v is None else json.dumps(v, allow_nan=True)


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
