"""Load a config file into typed, validated objects, collecting every problem.

Each collector and store section is validated by its plugin's own ``Config``
model (the plugin is found by ``type`` through the entry-point registry); the
``rules:`` section by the rules engine's ``RulesConfig``.  All problems are
collected and raised together as one :class:`ConfigError` whose message has
one line per problem: ``FILE:LINE: key.path: what is wrong``.
"""

from __future__ import annotations

import importlib
from collections.abc import Collection
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from probeflow.config.models import ConfigFileModel, NotifySettings, ProbeConfig, ServiceSettings
from probeflow.config.problems import fields_of, problems_from_validation
from probeflow.config.secrets import SecretResolution, interpolate_env, resolve_secret_keys
from probeflow.config.yamlfile import KeyPath, YamlDocument, format_key_path, read_yaml_text
from probeflow.errors import ConfigError, PluginError
from probeflow.plugins import COLLECTORS, STORES, load_plugin

__all__ = ["ALL_SECTIONS", "LoadedConfig", "PluginSection", "load_config", "load_config_text"]

ALL_SECTIONS = ("collectors", "stores", "rules")


@dataclass(frozen=True)
class PluginSection:
    """One validated collector or store section and the plugin class for it."""

    group: str            # probeflow.collectors | probeflow.stores
    type: str
    key_path: str         # e.g. "stores[1]"
    plugin: Any
    config: BaseModel

    @property
    def name(self) -> str:
        given = getattr(self.config, "name", None)
        return str(given) if given else f"{self.type}#{self.key_path}"


@dataclass(frozen=True)
class LoadedConfig:
    """A validated config file, ready to build a service from."""

    path: str
    site: str
    probes: tuple[ProbeConfig, ...]
    collectors: tuple[PluginSection, ...] = ()
    stores: tuple[PluginSection, ...] = ()
    rules: Any = None
    service: ServiceSettings = field(default_factory=ServiceSettings)
    warnings: tuple[str, ...] = ()
    notify: NotifySettings = field(default_factory=NotifySettings)

    @property
    def probe_ids(self) -> tuple[str, ...]:
        return tuple(p.id for p in self.probes)


class _Problems:
    def __init__(self, filename: str, doc: YamlDocument) -> None:
        self.filename = filename
        self.doc = doc
        self.items: list[tuple[int | None, str, str]] = []

    def add(self, path: KeyPath, message: str, line: int | None = None) -> None:
        where = line if line is not None else self.doc.line_of(path)
        self.items.append((where, format_key_path(path), message))

    def render(self, line: int | None, key: str, message: str) -> str:
        where = f"{self.filename}:{line}" if line else self.filename
        return f"{where}: {key}: {message}"

    def raise_if_any(self) -> None:
        if not self.items:
            return
        items = sorted(self.items, key=lambda t: (t[0] or 0))
        lines = [self.render(*t) for t in items]
        count = f"{len(items)} problem{'s' if len(items) != 1 else ''}"
        raise ConfigError(
            f"{self.filename} has {count}:\n  " + "\n  ".join(lines),
            path=self.filename,
            problems=[(key, f"line {line}: {msg}" if line else msg) for line, key, msg in items],
        )


def load_config(path: str | Path, *, sections: Collection[str] = ALL_SECTIONS,
                require_secrets: bool = True) -> LoadedConfig:
    """Read and validate ``path``.

    sections         which of collectors/stores/rules to validate (``filter``
                     needs only the probes and rules); the others are ignored.
    require_secrets  when False (``check``), an unset environment variable or
                     unreadable secret file is a warning, not a problem.
    """
    file = Path(path)
    try:
        text = file.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{file}: cannot read the config file: {exc.strerror}",
                          path=str(file), problems=[("(file)", str(exc.strerror))]) from exc
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{file}: the config file is not UTF-8 text", path=str(file),
                          problems=[("(file)", "not UTF-8 text")]) from exc
    return load_config_text(text, str(file), base_dir=file.resolve().parent,
                            sections=sections, require_secrets=require_secrets)


def load_config_text(text: str, filename: str, *, base_dir: Path | None = None,
                     sections: Collection[str] = ALL_SECTIONS,
                     require_secrets: bool = True) -> LoadedConfig:
    """Validate config text that came from ``filename`` (see :func:`load_config`)."""
    doc = read_yaml_text(text, filename)
    problems = _Problems(filename, doc)
    for key_path, message, line in doc.duplicates:
        problems.add(key_path, message, line)
    data = doc.data if doc.data is not None else {}
    if not isinstance(data, dict):
        problems.add((), "expected a mapping with site, probes, collectors, stores, rules")
        problems.raise_if_any()
    secrets = SecretResolution()
    data = interpolate_env(data, (), secrets)
    base = base_dir or Path.cwd()

    top: ConfigFileModel | None = None
    try:
        top = ConfigFileModel.model_validate(data)
    except ValidationError as exc:
        for key_path, message in problems_from_validation(exc, (), ConfigFileModel, secrets.sensitive,
                                                         data):
            problems.add(key_path, message)
    raw_probes = data.get("probes")
    if not raw_probes:
        problems.add(("probes",), "at least one probe is needed (a list of {id: ...} entries)")
    elif isinstance(raw_probes, list):
        seen: dict[str, int] = {}
        for i, probe in enumerate(raw_probes):
            pid = probe.get("id") if isinstance(probe, dict) else None
            if isinstance(pid, str) and pid in seen:
                problems.add(("probes", i, "id"),
                             f'probe id "{pid}" is already used by probes[{seen[pid]}]')
            elif isinstance(pid, str):
                seen[pid] = i
    probe_ids = [p.get("id") for p in raw_probes if isinstance(p, dict)] if isinstance(raw_probes, list) else []

    collectors: list[PluginSection] = []
    stores: list[PluginSection] = []
    for key, group, out in (("collectors", COLLECTORS, collectors), ("stores", STORES, stores)):
        raw = data.get(key)
        if key not in sections or not isinstance(raw, list):
            continue
        for i, section in enumerate(raw):
            if isinstance(section, dict):
                found = _plugin_section(group, key, i, section, base, secrets, problems,
                                        require_secrets)
                if found is not None:
                    out.append(found)

    rules = None
    if "rules" in sections and data.get("rules") is not None:
        rules = _rules_section(data["rules"], probe_ids, secrets, problems)

    warnings = [problems.render(doc.line_of(p), format_key_path(p), m) for p, m in secrets.warnings]
    for key_path, message in secrets.missing:
        if require_secrets:
            problems.add(key_path, message)
        else:
            warnings.append(problems.render(doc.line_of(key_path), format_key_path(key_path),
                                            message + " (needed when the service runs)"))
    problems.raise_if_any()
    if top is None:  # pragma: no cover - validation failed means problems were raised
        raise ConfigError(f"{filename}: invalid", path=filename)
    return LoadedConfig(path=filename, site=top.site, probes=tuple(top.probes),
                        collectors=tuple(collectors), stores=tuple(stores), rules=rules,
                        service=top.service, warnings=tuple(warnings), notify=top.notify)


def _plugin_section(group: str, key: str, index: int, section: dict[str, Any], base: Path,
                    secrets: SecretResolution, problems: _Problems,
                    secrets_required: bool = True) -> PluginSection | None:
    """Validate one section with its plugin's model.  The validation context
    carries ``base_dir`` and ``require_secrets`` (False under ``check``: a
    plugin resolving its own secrets should then not fail on an unset one)."""
    path: KeyPath = (key, index)
    kind = section.get("type")
    if not isinstance(kind, str) or not kind:
        problems.add(path + ("type",), "each entry needs a type (which plugin reads or writes it)"
                     if kind is None else f"expected a plugin name, got {kind!r}")
        return None
    try:
        plugin = load_plugin(group, kind)
    except PluginError as exc:
        problems.add(path + ("type",), str(exc))
        return None
    model: type[BaseModel] = plugin.Config
    section = resolve_secret_keys(section, fields_of(model), path, base, secrets)
    try:
        config = model.model_validate(section, context={"base_dir": str(base),
                                                       "require_secrets": secrets_required})
    except ValidationError as exc:
        for key_path, message in problems_from_validation(exc, path, model, secrets.sensitive, section):
            problems.add(key_path, message)
        return None
    return PluginSection(group, kind, f"{key}[{index}]", plugin, config)


def _rules_section(raw: Any, probe_ids: list[Any], secrets: SecretResolution,
                   problems: _Problems) -> Any:
    try:
        module = importlib.import_module("probeflow.rules.config")
        model = module.RulesConfig
    except (ImportError, AttributeError) as exc:
        problems.add(("rules",), f"the rules engine could not be loaded ({exc}); "
                     "remove the rules section or install a complete probeflow")
        return None
    try:
        return model.model_validate(raw, context={"probe_ids": probe_ids})
    except ValidationError as exc:
        for key_path, message in problems_from_validation(exc, ("rules",), model, secrets.sensitive, raw):
            problems.add(key_path, message)
    return None
