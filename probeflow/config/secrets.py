"""Secrets and environment values in config files.

Three ways to keep a secret out of the file, all resolved at load time:

* ``password: ${MQTT_PASSWORD}`` — any string may contain ``${NAME}`` or
  ``${NAME:-default}``; it is replaced by the environment variable.
* ``token_env: INFLUX_TOKEN`` — when the plugin's model has a ``token`` field,
  the value is read from that environment variable.
* ``token_file: /etc/probeflow/token`` — read from the file (trailing newline
  removed; a relative path is taken from the config file's folder).

Resolved values are handed to the plugin model, whose secret fields are
``SecretStr`` so they never appear in ``check`` output, logs or errors.
"""

from __future__ import annotations

import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from probeflow.config.yamlfile import KeyPath

__all__ = ["SecretResolution", "interpolate_env", "resolve_secret_keys"]

_ENV_REF = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)(?::-([^}]*))?\}")


@dataclass
class SecretResolution:
    """What resolving found: unresolvable references and values to hide."""

    missing: list[tuple[KeyPath, str]] = field(default_factory=list)
    warnings: list[tuple[KeyPath, str]] = field(default_factory=list)
    sensitive: set[KeyPath] = field(default_factory=set)


def interpolate_env(data: Any, path: KeyPath, result: SecretResolution,
                    environ: dict[str, str] | os._Environ[str] = os.environ) -> Any:
    """Copy of ``data`` with ``${NAME}`` references replaced in every string."""
    if isinstance(data, dict):
        return {k: interpolate_env(v, path + (k,), result, environ) for k, v in data.items()}
    if isinstance(data, list):
        return [interpolate_env(v, path + (i,), result, environ) for i, v in enumerate(data)]
    if isinstance(data, str) and "${" in data:
        def repl(match: re.Match[str]) -> str:
            name, default = match.group(1), match.group(2)
            value = environ.get(name)
            if value is None:
                if default is not None:
                    return default
                result.missing.append((path, f"environment variable {name} is not set"))
                return ""
            return value

        result.sensitive.add(path)
        return _ENV_REF.sub(repl, data)
    return data


def resolve_secret_keys(section: dict[str, Any], fields: set[str], path: KeyPath,
                        base_dir: Path, result: SecretResolution,
                        environ: dict[str, str] | os._Environ[str] = os.environ) -> dict[str, Any]:
    """Turn ``X_env``/``X_file`` keys into ``X`` when the model has a field ``X``
    (and no field named ``X_env``/``X_file`` itself)."""
    out = dict(section)
    for key, value in section.items():
        if not isinstance(key, str) or key in fields:
            continue
        for suffix in ("_env", "_file"):
            if not key.endswith(suffix) or key[: -len(suffix)] not in fields:
                continue
            base = key[: -len(suffix)]
            key_path = path + (key,)
            del out[key]
            result.sensitive.add(path + (base,))
            if not isinstance(value, str) or not value:
                result.missing.append((key_path, "expected the name of "
                                       + ("an environment variable" if suffix == "_env" else "a file")))
                out[base] = ""
            elif suffix == "_env":
                secret = environ.get(value)
                if secret is None:
                    result.missing.append((key_path, f"environment variable {value} is not set"))
                out[base] = secret or ""
            else:
                out[base] = _read_secret_file(Path(value), base_dir, key_path, result)
    return out


def _read_secret_file(file: Path, base_dir: Path, key_path: KeyPath,
                      result: SecretResolution) -> str:
    if not file.is_absolute():
        file = base_dir / file
    try:
        text = file.read_text(encoding="utf-8")
        mode = file.stat().st_mode
    except OSError as exc:
        result.missing.append((key_path, f"cannot read the secret file {file}: {exc.strerror}"))
        return ""
    except UnicodeDecodeError:
        result.missing.append((key_path, f"the secret file {file} is not UTF-8 text"))
        return ""
    if mode & (stat.S_IRGRP | stat.S_IROTH):
        result.warnings.append(
            (key_path, f"the secret file {file} is readable by other users; chmod 600 it")
        )
    return text.rstrip("\r\n")
