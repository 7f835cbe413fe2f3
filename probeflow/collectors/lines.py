"""Taking ASCII lines from serial instruments apart into reading fields.

Three layouts, chosen per port:

``csv``    columns in a fixed order named by ``fields``, e.g. ``[probe, mv, temp_c]``
           for ``tank-3,-12.34,41.7``; ``_`` skips a column.
``kv``     ``key=value`` pairs separated by spaces, commas or semicolons, e.g.
           ``probe=tank-3 mv=-12.34 temp_c=41.7``; ``keys`` renames the device's
           keys (``{E: mv, T: temp_c}``); other keys are ignored (status words).
``regex``  a regular expression with named groups among probe, ts, mv, temp_c,
           ohms, searched in the line, e.g. ``E=(?P<mv>\\S+) mV T=(?P<temp_c>\\S+)``.

The result is a dict of field name -> text or number, ready for
:meth:`probeflow.collectors.parse.RecordParser.record`, which applies the same
checks as to JSON readings (finite numbers, known probe, plausible time).
A line that does not fit raises :class:`~probeflow.errors.ParseError`.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from typing import Literal

from probeflow.errors import ParseError

__all__ = ["LINE_FIELDS", "SKIP_COLUMN", "LineFormat", "LineParser"]

LINE_FIELDS = ("probe", "ts", "mv", "temp_c", "ohms")
"""The fields a line may carry."""

SKIP_COLUMN = "_"
"""A csv column name that means: ignore this column."""

LineFormat = Literal["csv", "kv", "regex"]

_KV_SPLIT = re.compile(r"[\s,;]+")


def _number(text: str, name: str) -> float:
    try:
        return float(text)
    except ValueError:
        shown = text if len(text) <= 40 else text[:37] + "..."
        raise ParseError(f"{name} is not a number: {shown!r}") from None


def _timestamp(text: str) -> float | str:
    """Epoch seconds as a number, anything else left as text for RFC 3339 parsing."""
    try:
        return float(text)
    except ValueError:
        return text


class LineParser:
    """One port's line layout, checked once when built.

    Raises ValueError (with a message naming the config key) for a layout that
    cannot work, e.g. csv ``fields`` without ``mv``.
    """

    def __init__(
        self,
        fmt: LineFormat,
        *,
        fields: Sequence[str] | None = None,
        pattern: str | None = None,
        delimiter: str = ",",
        keys: Mapping[str, str] | None = None,
        probe: str | None = None,
    ) -> None:
        self.format = fmt
        self.delimiter = delimiter
        self._fields: tuple[str, ...] = ()
        self._regex: re.Pattern[str] | None = None
        self._keys: dict[str, str] = {}
        if fmt == "csv":
            self._fields = self._check_fields(fields)
            if not delimiter:
                raise ValueError("delimiter: must not be empty")
            carries_probe = "probe" in self._fields
        elif fmt == "kv":
            self._keys = self._check_keys(keys or {})
            carries_probe = True  # known only per line
        elif fmt == "regex":
            self._regex = self._check_pattern(pattern)
            carries_probe = "probe" in self._regex.groupindex
        else:
            raise ValueError(f"format: expected csv, kv or regex, got {fmt!r}")
        if not carries_probe and probe is None:
            raise ValueError(
                "probe: the lines carry no probe id, so set `probe:` to the id of the probe on this port"
            )

    # -- checks at build time -------------------------------------------------------
    @staticmethod
    def _check_fields(fields: Sequence[str] | None) -> tuple[str, ...]:
        if not fields:
            raise ValueError("fields: the csv format needs the column names, e.g. [probe, mv, temp_c]")
        named = [f for f in fields if f != SKIP_COLUMN]
        for name in named:
            if name not in LINE_FIELDS:
                raise ValueError(
                    f"fields: unknown column {name!r}; use {', '.join(LINE_FIELDS)} or {SKIP_COLUMN} to skip"
                )
        if len(set(named)) != len(named):
            raise ValueError("fields: a column name appears twice")
        if "mv" not in named:
            raise ValueError("fields: there must be an mv column")
        return tuple(fields)

    @staticmethod
    def _check_keys(keys: Mapping[str, str]) -> dict[str, str]:
        out = {name: name for name in LINE_FIELDS}
        for device_key, field in keys.items():
            if field not in LINE_FIELDS:
                raise ValueError(f"keys.{device_key}: {field!r} is not one of {', '.join(LINE_FIELDS)}")
            out[device_key] = field
        return out

    @staticmethod
    def _check_pattern(pattern: str | None) -> re.Pattern[str]:
        if not pattern:
            raise ValueError("pattern: the regex format needs a pattern with named groups, e.g. (?P<mv>...)")
        try:
            regex = re.compile(pattern)
        except re.error as exc:
            raise ValueError(f"pattern: not a valid regular expression ({exc})") from None
        for group in regex.groupindex:
            if group not in LINE_FIELDS:
                raise ValueError(f"pattern: unknown group name {group!r}; use {', '.join(LINE_FIELDS)}")
        if "mv" not in regex.groupindex:
            raise ValueError("pattern: there must be a group named mv, e.g. (?P<mv>-?[0-9.]+)")
        return regex

    # -- per line ---------------------------------------------------------------------
    def texts(self, line: str) -> dict[str, str]:
        """The field texts of one line (without its line end)."""
        if self.format == "csv":
            cells = line.split(self.delimiter)
            if len(cells) != len(self._fields):
                raise ParseError(
                    f"wrong column count: expected {len(self._fields)} ({', '.join(self._fields)}), "
                    f"got {len(cells)}"
                )
            return {f: c.strip() for f, c in zip(self._fields, cells) if f != SKIP_COLUMN}
        if self.format == "kv":
            out: dict[str, str] = {}
            for token in _KV_SPLIT.split(line.strip()):
                if not token:
                    continue
                key, sep, value = token.partition("=")
                if not sep:
                    shown = token if len(token) <= 40 else token[:37] + "..."
                    raise ParseError(f"not a key=value pair: {shown!r}")
                field = self._keys.get(key)
                if field is not None:
                    out[field] = value
            return out
        regex = self._regex
        if regex is None:  # unreachable: checked in __init__
            raise ParseError("no pattern")
        match = regex.search(line)
        if match is None:
            raise ParseError("line does not match the pattern")
        return {k: v for k, v in match.groupdict().items() if v is not None}

    def values(self, line: str) -> dict[str, object]:
        """The line's fields with numbers converted: probe text, ts number or
        text, mv/temp_c/ohms floats (non-finite values are left for the record
        check to reject)."""
        texts = self.texts(line)
        out: dict[str, object] = {}
        for name, text in texts.items():
            if name == "probe":
                if text:
                    out["probe"] = text
            elif name == "ts":
                if text:
                    out["ts"] = _timestamp(text)
            elif text == "" and name != "mv":
                continue  # an empty optional column: no value
            else:
                out[name] = _number(text, name)
        return out
