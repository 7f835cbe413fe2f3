"""docs/README-data-layout.md shows the real CREATE TABLE statements, and its queries run."""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

from probeflow.calibration.store import SCHEMA as CALIBRATION_SCHEMA
from probeflow.calibration.store import CalibrationStore
from probeflow.stores.sqlite import SCHEMA as STORE_SCHEMA
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig
from tests.views.conftest import REPO

DOC = REPO / "docs" / "README-data-layout.md"


def sql_blocks() -> list[str]:
    return re.findall(r"```sql\n(.*?)```", DOC.read_text(encoding="utf-8"), flags=re.DOTALL)


def squash(sql: str) -> str:
    return " ".join(sql.split())


def test_doc_has_the_stores_create_statements() -> None:
    creates = [squash(b) for b in sql_blocks() if "CREATE TABLE" in b]
    assert squash(STORE_SCHEMA) in creates
    assert squash(CALIBRATION_SCHEMA) in creates


def test_doc_queries_run_on_a_real_store(tmp_path: Path) -> None:
    db = tmp_path / "pf.sqlite"
    SqliteStore(SqliteStoreConfig(path=str(db))).close()
    CalibrationStore(db).close()
    con = sqlite3.connect(db)
    queries = [b for b in sql_blocks() if "CREATE TABLE" not in b]
    assert len(queries) >= 4
    for query in queries:
        con.execute(query).fetchall()
    con.close()
