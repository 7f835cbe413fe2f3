"""Find collector, store and rule plugins through entry-point groups.

Built-in parts register exactly like a site's own plugins, in
``pyproject.toml``::

    [project.entry-points."probeflow.collectors"]
    file = "probeflow.collectors.file:FileCollector"

``load_plugin("probeflow.collectors", "file")`` returns the class.  A plugin
that is not installed, fails to import, or lacks a pydantic ``Config`` model
raises :class:`PluginError` naming the plugin and what went wrong.
Plugins can also be registered in-process (tests, embedding) with
:func:`register_plugin`.
"""

from __future__ import annotations

import threading
from importlib.metadata import EntryPoint, entry_points
from typing import Any

from pydantic import BaseModel

from probeflow.errors import PluginError

__all__ = [
    "COLLECTORS",
    "GROUP_NOUNS",
    "RULES",
    "STORES",
    "available_plugins",
    "load_plugin",
    "register_plugin",
    "unregister_plugin",
]

COLLECTORS = "probeflow.collectors"
STORES = "probeflow.stores"
RULES = "probeflow.rules"

GROUP_NOUNS = {COLLECTORS: "collector", STORES: "store", RULES: "rule"}

_lock = threading.Lock()
_local: dict[tuple[str, str], Any] = {}
_cache: dict[tuple[str, str], Any] = {}


def _entry_points(group: str) -> dict[str, EntryPoint]:
    return {ep.name: ep for ep in entry_points(group=group)}


def available_plugins(group: str) -> list[str]:
    """Names registered in ``group`` (entry points and in-process ones), sorted."""
    names = set(_entry_points(group))
    names.update(name for (g, name) in _local if g == group)
    return sorted(names)


def register_plugin(group: str, name: str, plugin: Any) -> None:
    """Register ``plugin`` under ``name`` in this process (takes precedence)."""
    with _lock:
        _local[(group, name)] = plugin
        _cache.pop((group, name), None)


def unregister_plugin(group: str, name: str) -> None:
    with _lock:
        _local.pop((group, name), None)
        _cache.pop((group, name), None)


def load_plugin(group: str, name: str) -> Any:
    """The plugin class registered as ``name`` in ``group``.

    Collector and store plugins must carry a pydantic ``Config`` model.
    """
    noun = GROUP_NOUNS.get(group, "plugin")
    key = (group, name)
    with _lock:
        if key in _local:
            plugin = _local[key]
        elif key in _cache:
            return _cache[key]
        else:
            plugin = None
    if plugin is None:
        eps = _entry_points(group)
        ep = eps.get(name)
        if ep is None:
            known = ", ".join(available_plugins(group)) or "none"
            raise PluginError(
                f'no {noun} plugin "{name}" is installed (installed {noun}s: {known})'
            )
        try:
            plugin = ep.load()
        except Exception as exc:  # any import failure of third-party code
            raise PluginError(
                f'no {noun} plugin "{name}" could be loaded: {ep.value} failed to import '
                f"({type(exc).__name__}: {exc})"
            ) from exc
    if group in (COLLECTORS, STORES):
        config_model = getattr(plugin, "Config", None)
        if not (isinstance(config_model, type) and issubclass(config_model, BaseModel)):
            raise PluginError(
                f'the {noun} plugin "{name}" has no pydantic Config model, so its '
                "config section cannot be checked"
            )
    with _lock:
        _cache[key] = plugin
    return plugin
