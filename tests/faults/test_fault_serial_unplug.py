"""Scenario 4: the serial port disappears and comes back, three times.

The port path is a symlink to the slave side of a real pseudo-terminal; an
unplug closes the pseudo-terminal (the reader's next read fails) and a new one
appears behind the same path.  The writer behaves like an instrument on a
cable: it writes only complete lines and only while a reader has the port
open.  Lines written while nobody has the port open are lost by physics (no
one is listening on the wire), so N counts the lines written while the port
was open; the test waits for the collector to reopen before writing again,
and before each unplug it waits until the reader has taken every byte from
the pseudo-terminal (what is still in flight on a real cable when it is
pulled is lost in the same way).

What is tested is probeflow's side: a reader that loses its device while
readings are read but not yet committed, reopens with backoff, drops no
complete line and stores none twice.  Expected: exactly N distinct readings
in SQLite and in victoria-metrics.
"""

from __future__ import annotations

import pytest
from fault_harness import (
    ServiceProcess,
    Stream,
    assert_every_reading_once,
    sqlite_counts,
    sqlite_keys,
    victoria_counts,
    wait_for_count,
    wait_until,
    write_config,
)
from pty_port import SwappablePty

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 3000
SEGMENTS = 4             # open, then three unplug / plug-in cycles
CHUNK = 25               # lines per write
CHUNK_PAUSE_S = 0.02     # about 1250 lines per second


def _serial_collector(port: str, fields: list[str]) -> dict:
    return {"type": "serial", "port": port, "baud": 115200, "format": "csv", "fields": fields,
            "timeout_s": 0.1, "reopen_backoff_min_s": 0.1, "reopen_backoff_max_s": 0.5}


def _wait_open(service: ServiceProcess, opens: int) -> None:
    wait_until(lambda: service.log_text().count("event=serial_opened") >= opens, 30,
               f"the collector to open the port (open #{opens})", interval=0.05)


def test_serial_port_unplugged_three_times_loses_and_duplicates_nothing(tmp_path, victoria, services):
    import time

    link = tmp_path / "ttyPH0"
    port = SwappablePty(link)
    port.plug()
    db = tmp_path / "readings.sqlite"
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[_serial_collector(str(link), ["probe", "ts", "mv", "temp_c"])],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite")},
    )
    service = ServiceProcess(config, tmp_path / "service.log")
    services.append(service)
    service.start()

    stream = Stream(N)
    per_segment = N // SEGMENTS
    written = 0
    stored_at_unplug: list[int] = []
    try:
        for segment in range(SEGMENTS):
            _wait_open(service, segment + 1)
            port.write(b"\r\n")   # an instrument's line end first: the reader's first line is empty
            end = N if segment == SEGMENTS - 1 else written + per_segment
            while written < end:
                upto = min(end, written + CHUNK)
                port.write(b"".join(stream.csv_line(i) for i in range(written, upto)))
                written = upto
                time.sleep(CHUNK_PAUSE_S)
            if segment < SEGMENTS - 1:
                port.wait_drained()
                port.unplug()
                stored_at_unplug.append(sqlite_counts(db)[1])
                port.plug()
        port.wait_drained()
        wait_for_count(lambda: sqlite_counts(db)[1], N, 60, "readings in SQLite")
        wait_for_count(lambda: victoria_counts(victoria).distinct, N, 60, "readings in victoria-metrics")
    finally:
        port.unplug()

    assert written == N
    assert len(stored_at_unplug) == SEGMENTS - 1
    assert_every_reading_once(db, victoria, stream, N)
    log = service.log_text()
    assert log.count("event=serial_opened") == SEGMENTS
    assert "event=serial_device_gone" in log     # logged once a minute per kind
    assert service.stop() == 0, service.log_tail()


def test_arrival_stamped_lines_stay_distinct_in_the_time_series_database(tmp_path, victoria, services):
    import time

    n = 400
    link = tmp_path / "ttyPH1"
    port = SwappablePty(link)
    port.plug()
    db = tmp_path / "readings.sqlite"
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[_serial_collector(str(link), ["probe", "mv", "temp_c"])],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite")},
    )
    service = ServiceProcess(config, tmp_path / "service.log")
    services.append(service)
    service.start()
    stream = Stream(n)
    try:
        _wait_open(service, 1)
        port.write(b"\r\n")
        for start in range(0, n, CHUNK):     # 25 lines per write, as a device with a buffer sends them
            port.write(b"".join(f"{stream.probe(i)},{stream.mv(i)},18.5\r\n".encode()
                                for i in range(start, min(n, start + CHUNK))))
            time.sleep(CHUNK_PAUSE_S)
        port.wait_drained()
        wait_for_count(lambda: sqlite_counts(db)[1], n, 60, "readings in SQLite")
    finally:
        port.unplug()
    assert sqlite_counts(db) == (n, n)
    # the points victoria-metrics can hold: SQLite's (probe, ts) at millisecond precision
    ms_keys = {(p, round(t * 1000)) for p, t in sqlite_keys(db)}
    wait_for_count(lambda: victoria_counts(victoria).distinct, len(ms_keys), 60,
                   "points in victoria-metrics")
    counts = victoria_counts(victoria)
    assert counts.duplicated_series == {}
    assert counts.keys == ms_keys          # the store forwarded everything it was given
    assert len(ms_keys) == n, f"{n - len(ms_keys)} of {n} readings share a millisecond with another"
    assert service.stop() == 0, service.log_tail()
