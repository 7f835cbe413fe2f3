"""The one exception tree of probeflow.

Every error that reaches a user is a :class:`ProbeflowError`; foreign exceptions
(pyserial, paho-mqtt, influxdb-client, sqlite3, pydantic, yaml) are translated at
the boundary that meets them, with ``raise ... from exc``::

    ProbeflowError
     +-- ConfigError          a config or scenario file is wrong (names file, line, key path)
     +-- PluginError          a collector/store/rule plugin cannot be loaded
     +-- CollectorError       a source of readings cannot be opened or read
     +-- StoreError           a store cannot be written
     +-- CalibrationError     a calibration cannot be fitted or is not acceptable
     +-- ChemistryError       an input is outside a formula's validity range
     |    +-- BufferRangeError  a buffer temperature outside its table
     +-- ParseError           one input line or payload is malformed (quarantined, never fatal)

Messages are written for a plant technician: what is wrong, where, and what to do.
"""

from __future__ import annotations

__all__ = [
    "BufferRangeError",
    "CalibrationError",
    "ChemistryError",
    "CollectorError",
    "ConfigError",
    "ParseError",
    "PluginError",
    "ProbeflowError",
    "StoreError",
]


class ProbeflowError(Exception):
    """Root of every error probeflow raises on purpose."""


class ConfigError(ProbeflowError):
    """A configuration file is wrong.

    ``problems`` lists ``(key_path, message)`` pairs; ``path`` is the file.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        problems: list[tuple[str, str]] | None = None,
    ) -> None:
        super().__init__(message)
        self.path = path
        self.problems = list(problems or [])


class PluginError(ProbeflowError):
    """A plugin named in the config could not be found or loaded."""


class CollectorError(ProbeflowError):
    """A source of readings could not be opened or read."""


class StoreError(ProbeflowError):
    """A store could not be opened or written."""


class CalibrationError(ProbeflowError):
    """A calibration could not be fitted, or its points are unusable."""


class ChemistryError(ProbeflowError):
    """An input lies outside the validity range of a formula or table."""


class BufferRangeError(ChemistryError):
    """A buffer's pH was asked for at a temperature outside its table."""


class ParseError(ProbeflowError):
    """One input line or payload is malformed; ``reason`` says why.

    Raised only inside parsers; the collector catches it, counts it and
    quarantines the raw text. It never stops the service.
    """

    def __init__(self, reason: str, raw: str | bytes | None = None) -> None:
        super().__init__(reason)
        self.reason = reason
        self.raw = raw
