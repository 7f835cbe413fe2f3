"""The durable outbox on its own: real SQLite files, a real subprocess killed with SIGKILL."""

from __future__ import annotations

import logging
import os
import signal
import stat
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

from probeflow.stores.outbox import Outbox

REPO = Path(__file__).resolve().parents[2]


def lines_for(tag: str, n: int) -> list[str]:
    return [f"ph,probe={tag} mv={i}.5 {1764633600000 + i}" for i in range(n)]


def test_appended_lines_come_back_oldest_first_in_chunks(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    box.append(lines_for("a", 7), "ms", max_lines_per_row=3)
    box.append(lines_for("b", 2), "s", max_lines_per_row=3)
    assert (box.rows, box.lines) == (4, 9)
    first = box.oldest(max_lines=5)  # chunks of 3 + 3 would exceed 5: one chunk only
    assert [r.n_lines for r in first] == [3]
    assert first[0].body.decode().split("\n") == lines_for("a", 7)[:3]
    rest = box.oldest(max_lines=100)
    assert [r.precision for r in rest] == ["ms", "ms", "ms"]  # stops where the precision changes
    box.delete([r.id for r in rest])
    assert box.lines == 2 and box.oldest(10)[0].precision == "s"
    box.close()


def test_file_is_private(tmp_path):
    box = Outbox(tmp_path / "sub" / "o.sqlite")
    box.append(lines_for("a", 1), "ms")
    for name in ("o.sqlite", "o.sqlite-wal"):
        mode = stat.S_IMODE(os.stat(tmp_path / "sub" / name).st_mode)
        assert mode == 0o600, (name, oct(mode))
    box.close()


def test_rows_survive_a_process_killed_with_sigkill(tmp_path):
    """Lines appended by a process that is then killed -9 are all in the file on reopening."""
    path = tmp_path / "o.sqlite"
    script = textwrap.dedent(f"""
        import sys, time
        sys.path.insert(0, {str(REPO)!r})
        from probeflow.stores.outbox import Outbox
        box = Outbox({str(path)!r})
        for k in range(20):
            box.append([f"ph,probe=p{{k}} mv={{i}}.5 {{1764633600000 + i}}" for i in range(50)], "ms")
        print("appended", flush=True)
        time.sleep(60)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout is not None and proc.stdout.readline().strip() == "appended"
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait(10)
    assert proc.returncode == -signal.SIGKILL
    box = Outbox(path)
    assert (box.rows, box.lines) == (20, 1000)
    bodies = [r.body.decode() for r in box.oldest(10_000)]
    assert bodies[3].split("\n")[49] == "ph,probe=p3 mv=49.5 1764633600049"
    box.close()


def test_drop_oldest_counts_and_reports_every_lost_line(tmp_path, caplog):
    chunk = lines_for("p0", 10)  # every chunk below has the same size
    size = len("\n".join(chunk).encode())
    box = Outbox(tmp_path / "o.sqlite", quota_bytes=3 * size, on_quota="drop_oldest",
                 log=logging.getLogger("test.outbox"))
    with caplog.at_level(logging.WARNING, logger="test.outbox"):
        for k in range(5):
            box.append(lines_for(f"p{k}", 10), "ms")
    assert box.dropped_lines == 20 and box.lines == 30 and box.bytes <= 3 * size
    kept = [r.body.decode().split(",")[1].split(" ")[0] for r in box.oldest(1000)]
    assert kept == ["probe=p2", "probe=p3", "probe=p4"]
    assert "deleted the 10 oldest unsent points" in caplog.text
    assert "10 lost since start" in caplog.text
    assert "% full" in caplog.text  # the early warning came first
    # one drop report per minute, not one per append: the count stays exact
    assert caplog.text.count("oldest unsent points") == 1
    box.close()


def test_drop_reports_carry_the_running_total(tmp_path, caplog):
    chunk = lines_for("p0", 10)
    size = len("\n".join(chunk).encode())
    box = Outbox(tmp_path / "o.sqlite", quota_bytes=3 * size, on_quota="drop_oldest",
                 log=logging.getLogger("test.outbox"))
    box.QUOTA_LOG_INTERVAL_S = 0.0  # report every drop
    with caplog.at_level(logging.WARNING, logger="test.outbox"):
        for k in range(5):
            box.append(lines_for(f"p{k}", 10), "ms")
    assert "10 lost since start" in caplog.text and "20 lost since start" in caplog.text
    box.close()


def test_block_holds_the_writer_until_there_is_room(tmp_path):
    chunk = lines_for("x", 10)
    size = len("\n".join(chunk).encode())
    box = Outbox(tmp_path / "o.sqlite", quota_bytes=2 * size, on_quota="block")
    box.append(chunk, "ms")
    box.append(chunk, "ms")
    done = threading.Event()
    writer = threading.Thread(target=lambda: (box.append(lines_for("z", 10), "ms"), done.set()))
    writer.start()
    assert not done.wait(0.5)  # still held: the outbox is full
    assert box.lines == 20
    box.delete([box.oldest(10)[0].id])
    writer.join(10)
    assert done.is_set() and box.lines == 20 and box.dropped_lines == 0
    assert "probe=z " in box.oldest(1000)[-1].body.decode()
    box.close()


def test_reject_moves_lines_aside_in_one_step(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    box.append(lines_for("a", 4), "ms", rejected=[("probe='bad\\nid'", "contains a line break")])
    row = box.oldest(10)[0]
    box.reject([row.id], [("ph,probe=a mv=1.5 1764633600001", "HTTP 400: bad value")])
    assert box.lines == 0 and box.rejected == 2
    assert box.rejected_rows() == [
        ("builder", "probe='bad\\nid'", "contains a line break"),
        ("server", "ph,probe=a mv=1.5 1764633600001", "HTTP 400: bad value"),
    ]
    box.close()
    assert Outbox(tmp_path / "o.sqlite").rejected == 2
