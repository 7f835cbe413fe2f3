"""Where operator views read from: the SQLite store named in the config, opened read-only.

The service writes its SQLite file in WAL mode, so a reader may open it while
the service runs: reading that file is the local interface of ``status`` and
``report``.  A relative store path is resolved as the service resolves it (from
the working directory); when no file is there, the config file's folder is
tried as well.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

from probeflow.config.load import LoadedConfig
from probeflow.errors import ConfigError, StoreError

__all__ = ["existing_tables", "open_store_readonly", "sqlite_store_path"]


def sqlite_store_path(config: LoadedConfig) -> Path:
    """The file of the first ``type: sqlite`` store in ``config``.

    Raises ConfigError naming the config file when there is none, and
    StoreError when the file does not exist (the service has not run yet).
    """
    sections = [s for s in config.stores if s.type == "sqlite"]
    if not sections:
        raise ConfigError(
            f"{config.path}: stores: no store of type sqlite; the status view and the report "
            "read the SQLite store, so add one (e.g. '- type: sqlite' with 'path: data/probeflow.sqlite')",
            path=config.path, problems=[("stores", "no sqlite store")])
    given = Path(str(getattr(sections[0].config, "path", "")))
    candidates = [given] if given.is_absolute() else [
        Path.cwd() / given, Path(config.path).resolve().parent / given]
    for candidate in candidates:
        if candidate.is_file():
            return candidate
    tried = " or ".join(str(c) for c in candidates)
    raise StoreError(f"the SQLite store {given} does not exist yet (looked for {tried}); "
                     "start the service or replay a recording with this config first")


def open_store_readonly(path: Path) -> sqlite3.Connection:
    """A read-only connection that never blocks the writing service for long."""
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=10.0)
        con.execute("PRAGMA query_only=ON")
        tables = existing_tables(con)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot read the SQLite store {path}: {exc}") from exc
    missing = {"readings", "alerts"} - tables
    if missing:
        con.close()
        raise StoreError(f"the SQLite store {path} has no {' or '.join(sorted(missing))} table yet; "
                         "start the service or replay a recording with this config first")
    return con


def existing_tables(con: sqlite3.Connection) -> set[str]:
    """Names of the tables present (the calibration tables exist only once used)."""
    rows = con.execute("SELECT name FROM sqlite_master WHERE type = 'table'").fetchall()
    return {str(r[0]) for r in rows}
