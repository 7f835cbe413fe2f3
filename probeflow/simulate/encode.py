"""Readings as text lines (JSON, csv, key=value) and the line noise that garbles some.

JSON:      {"probe":"bt-1","ts":1772431200.0,"mv":-12.45,"temp_c":18.02}
           (``temp_c`` left out when the probe reports none; an RTD probe gives ``ohms``)
csv:       probe,mv,temp_c             e.g. ``bt-1,-12.45,18.02``; empty temp_c when none.
           When some probe on the line reports ohms, every line has a fourth column:
           probe,mv,temp_c,ohms        e.g. ``of-1,3.1,,107.02`` and ``bt-1,-12.45,18.02,``
           (a fixed column count per port, as serial readers expect)
kv:        ``probe=bt-1 mv=-12.45 temp_c=18.02`` (``ohms=`` for an RTD probe)

Serial layouts carry no time: a serial instrument has no clock, the reader
stamps each line on arrival.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Literal

import numpy as np
import orjson

from probeflow.simulate.generator import Readings

__all__ = ["LAYOUTS", "Layout", "encode_lines", "garble_line"]

Layout = Literal["json", "csv", "kv"]
LAYOUTS: tuple[str, ...] = ("json", "csv", "kv")

# Noise bytes: UTF-8 continuation bytes (never valid after ASCII) and control characters
# other than line ends, so a garbled line can never pass as a valid reading.
_NOISE = np.array(
    [*range(0x80, 0xC0), *range(0x09), 0x0B, 0x0C, *range(0x0E, 0x20)], dtype=np.uint8
)


def garble_line(line: bytes, key: int) -> bytes:
    """Corrupt 1 to 4 bytes of ``line`` with line noise chosen by ``key`` (deterministic)."""
    rng = np.random.Generator(np.random.PCG64(int(key)))
    buf = bytearray(line)
    hits = int(rng.integers(1, 5))
    for pos in rng.integers(0, max(len(buf), 1), size=hits):
        noise = int(_NOISE[int(rng.integers(0, _NOISE.shape[0]))])
        if buf:
            buf[int(pos)] = noise
        else:
            buf.append(noise)
    return bytes(buf)


def _num(x: float) -> str:
    return "" if math.isnan(x) else repr(x)


def _json_rows(probes: list[str], ts: list[float], mv: list[float], temp: list[float],
               ohms: list[float], with_ts: bool) -> list[bytes]:
    out = []
    dumps = orjson.dumps
    for p, t, m, c, o in zip(probes, ts, mv, temp, ohms):
        rec: dict[str, object] = {"probe": p, "ts": t, "mv": m} if with_ts else {"probe": p, "mv": m}
        if not math.isnan(c):
            rec["temp_c"] = c
        if not math.isnan(o):
            rec["ohms"] = o
        out.append(dumps(rec))
    return out


def _csv_rows(probes: list[str], ts: list[float], mv: list[float], temp: list[float],
              ohms: list[float], with_ts: bool, ohms_column: bool = False) -> list[bytes]:
    out = []
    for p, m, c, o in zip(probes, mv, temp, ohms):
        line = f"{p},{_num(m)},{_num(c)},{_num(o)}" if ohms_column else f"{p},{_num(m)},{_num(c)}"
        out.append(line.encode("ascii"))
    return out


def _kv_rows(probes: list[str], ts: list[float], mv: list[float], temp: list[float],
             ohms: list[float], with_ts: bool) -> list[bytes]:
    out = []
    for p, m, c, o in zip(probes, mv, temp, ohms):
        line = f"probe={p} mv={_num(m)}"
        if not math.isnan(c):
            line += f" temp_c={_num(c)}"
        if not math.isnan(o):
            line += f" ohms={_num(o)}"
        out.append(line.encode("ascii"))
    return out


_ENCODERS: dict[str, Callable[..., list[bytes]]] = {"json": _json_rows, "csv": _csv_rows, "kv": _kv_rows}


def encode_lines(readings: Readings, layout: str = "json", *, with_ts: bool = True,
                 ohms_column: bool = False) -> list[bytes]:
    """One line per reading (no line end), garbled where the reading's ``garble`` key is set.

    ``ohms_column`` gives csv lines the fourth column (see the module text).
    """
    if layout not in _ENCODERS:
        raise ValueError(f"unknown line layout {layout!r}; choose one of {', '.join(LAYOUTS)}")
    columns = ([readings.probes[c] for c in readings.code.tolist()], readings.ts.tolist(),
               readings.mv.tolist(), readings.temp_c.tolist(), readings.ohms.tolist(), with_ts)
    if layout == "csv":
        lines = _csv_rows(*columns, ohms_column=ohms_column)
    else:
        lines = _ENCODERS[layout](*columns)
    if readings.garble is not None:
        for i in np.flatnonzero(readings.garble).tolist():
            lines[i] = garble_line(lines[i], int(readings.garble[i]))
    return lines
