"""Where a site's calibration data lives, and what a probe was calibrated with before.

* The calibration store is the SQLite file of the config's ``sqlite`` store
  (its ``path``; a relative path is taken from the working directory, as the
  service does).
* The calibration in effect for a probe is its latest accepted one in the
  store, else the ``calibration:`` given for it in the config, else none.
* Acceptance limits: the defaults of :class:`AcceptanceLimits`, overridden by
  the probe's ``acceptance:`` in the config, overridden in turn by a limits
  file (``--limits``), flat or per probe::

      slope_min_pct: 92          # applies to every probe
      probes:
        digester-ph: {offset_max_abs_mv: 40}
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from probeflow.calibration.acceptance import AcceptanceLimits
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.config.load import LoadedConfig
from probeflow.config.models import ProbeConfig
from probeflow.errors import ConfigError

__all__ = ["calibration_in_effect", "load_limits", "probe_config", "store_path"]


def store_path(config: LoadedConfig) -> Path:
    """The SQLite file of the config's sqlite store (ConfigError when there is none)."""
    for section in config.stores:
        if section.type == "sqlite":
            path = Path(str(getattr(section.config, "path", "")))
            return path if path.is_absolute() else Path.cwd() / path
    raise ConfigError(
        f"{config.path}: calibrations are kept in the SQLite store, but the config has no "
        "'type: sqlite' entry under stores; add one (or give --db FILE).",
        path=config.path, problems=[("stores", "no sqlite store")])


def probe_config(config: LoadedConfig, probe: str) -> ProbeConfig:
    for p in config.probes:
        if p.id == probe:
            return p
    raise ConfigError(f'{config.path}: probe "{probe}" is not in the config '
                      f"(probes: {', '.join(config.probe_ids)})",
                      path=config.path, problems=[("probes", f"no probe {probe!r}")])


def calibration_in_effect(store: CalibrationStore, probe: ProbeConfig | str,
                          at: float | None = None) -> Calibration | None:
    """Latest accepted calibration in the store (at ``at``), else the config's, else None."""
    probe_id = probe if isinstance(probe, str) else probe.id
    record = store.latest_accepted(probe_id, at=at)
    if record is not None and record.offset_mv is not None:
        return record.calibration()
    spec = None if isinstance(probe, str) else probe.calibration
    if spec is not None:
        return Calibration(float(spec.offset_mv), float(spec.slope_pct), float(spec.zero_ph))
    return None


def load_limits(path: str | Path | None, probe: str | ProbeConfig) -> AcceptanceLimits:
    """Acceptance limits for ``probe`` (module docstring): defaults, then the probe's
    ``acceptance:`` (when ``probe`` is its ProbeConfig), then the limits file."""
    merged: dict[str, Any] = {}
    key = "acceptance"
    if isinstance(probe, ProbeConfig):
        if probe.acceptance is not None:
            merged.update(probe.acceptance.given())
            key = f"probes.{probe.id}.acceptance"
        probe_id = probe.id
    else:
        probe_id = probe
    if path is None:
        return AcceptanceLimits.from_mapping(merged, key=key)
    p = Path(path)
    try:
        doc: Any = yaml.safe_load(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise ConfigError(f"Cannot read the limits file {p}: {exc.strerror}", path=str(p)) from exc
    except yaml.YAMLError as exc:
        raise ConfigError(f"The limits file {p} is not valid YAML: {exc}", path=str(p)) from exc
    if doc is None:
        doc = {}
    if not isinstance(doc, dict):
        raise ConfigError(f"{p}: expected a mapping of limit names to numbers", path=str(p),
                          problems=[("(top level)", "not a mapping")])
    per_probe = doc.get("probes") or {}
    if not isinstance(per_probe, dict):
        raise ConfigError(f"{p}: probes: expected a mapping of probe id to limits", path=str(p),
                          problems=[("probes", "not a mapping")])
    merged.update({k: v for k, v in doc.items() if k != "probes"})
    own = per_probe.get(probe_id) or {}
    if not isinstance(own, dict):
        raise ConfigError(f"{p}: probes.{probe_id}: expected a mapping of limits", path=str(p),
                          problems=[(f"probes.{probe_id}", "not a mapping")])
    merged.update(own)
    return AcceptanceLimits.from_mapping(merged, path=str(p),
                                         key=f"probes.{probe_id}" if own else "limits")
