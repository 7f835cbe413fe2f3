"""Read a YAML config file safely and remember the line of every key.

The loader is PyYAML's safe loader (no Python objects can be built from the
file).  Besides the data it returns a map from key path (a tuple of mapping
keys and list indexes, e.g. ``("probes", 2, "calibration", "slope_pct")``) to
the 1-based line where that key or list item starts, so a problem found later
by validation can point at the right line.  A key written twice in one mapping
is reported (PyYAML would silently keep the last one).

Aliases (``*name``) are refused when they would expand the file too far: a
few lines of nested aliases can stand for billions of values (a "billion
laughs" file), which every later step (line map, ``${VAR}`` resolution,
validation) would copy.  The expanded size is counted on the composed node
graph, each distinct node once, before anything is expanded.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import yaml

from probeflow.errors import ConfigError

__all__ = ["MAX_ALIAS_EXPANSION", "KeyPath", "YamlDocument", "format_key_path", "read_yaml_text"]

KeyPath = tuple[str | int, ...]

_Loader: type[yaml.SafeLoader] = getattr(yaml, "CSafeLoader", yaml.SafeLoader)  # type: ignore[assignment]

MAX_ALIAS_EXPANSION = 50_000
"""Most values (keys, list items, scalars) that aliases may add to a config
file beyond those written in it.  Sharing a block among many probes stays far
below this; nested aliases that multiply it are refused."""


@dataclass
class YamlDocument:
    """The parsed data, the line of every key path and duplicate-key problems."""

    data: Any
    lines: dict[KeyPath, int] = field(default_factory=dict)
    duplicates: list[tuple[KeyPath, str, int]] = field(default_factory=list)

    def line_of(self, path: KeyPath) -> int | None:
        """Line of ``path``, or of its nearest ancestor the file contains."""
        p = tuple(path)
        while p:
            line = self.lines.get(p)
            if line is not None:
                return line
            p = p[:-1]
        return self.lines.get((), None)


def format_key_path(path: KeyPath) -> str:
    """``("probes", 2, "calibration")`` -> ``probes[2].calibration``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "(top level)"


def read_yaml_text(text: str, filename: str) -> YamlDocument:
    """Parse ``text`` (the content of ``filename``) into data plus line numbers."""
    loader = _Loader(text)
    try:
        node = loader.get_single_node()
        if node is None:
            return YamlDocument(data=None)
        _check_alias_expansion(node, filename)
        data = loader.construct_document(node)  # also flattens merge keys in ``node``
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"{filename}:{mark.line + 1}" if mark is not None else filename
        problem = getattr(exc, "problem", None) or str(exc)
        raise ConfigError(
            f"{where}: this is not valid YAML: {problem}",
            path=filename,
            problems=[("(file)", f"not valid YAML: {problem}")],
        ) from exc
    finally:
        loader.dispose()
    doc = YamlDocument(data=data, lines={(): node.start_mark.line + 1})
    _walk(node, (), doc)
    return doc


def _children(node: yaml.Node) -> list[yaml.Node]:
    if isinstance(node, yaml.MappingNode):
        return [n for pair in node.value for n in pair]
    if isinstance(node, yaml.SequenceNode):
        return list(node.value)
    return []


def _expanded_size(root: yaml.Node) -> tuple[int | None, int]:
    """(values the node graph stands for once every alias is expanded, or None
    when an alias refers to a node containing it; distinct nodes written).
    Each distinct node is visited once (iteratively: no recursion limit)."""
    size: dict[int, int] = {}
    on_path: set[int] = set()
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    while stack:
        node, leaving = stack.pop()
        key = id(node)
        if leaving:
            on_path.discard(key)
            size[key] = 1 + sum(size[id(child)] for child in _children(node))
            continue
        if key in size:
            continue
        if key in on_path:
            return None, len(size)
        on_path.add(key)
        stack.append((node, True))
        stack.extend((child, False) for child in _children(node))
    return size[id(root)], len(size)


def _check_alias_expansion(root: yaml.Node, filename: str) -> None:
    expanded, written = _expanded_size(root)
    if expanded is None:
        problem = "an alias (*name) refers to a mapping or list that contains it, so it never ends"
    elif expanded - written > MAX_ALIAS_EXPANSION:
        total = str(expanded) if expanded < 10**9 else "more than a billion"
        problem = (f"the aliases (*name) expand too far: the {written} values written would become "
                   f"{total} (aliases may add at most {MAX_ALIAS_EXPANSION}); write the repeated "
                   "parts out or nest aliases less deeply")
    else:
        return
    raise ConfigError(f"{filename}: {problem}", path=filename, problems=[("(file)", problem)])


def _walk(node: yaml.Node, path: KeyPath, doc: YamlDocument) -> None:
    if isinstance(node, yaml.MappingNode):
        seen: dict[str, int] = {}
        for key_node, value_node in node.value:
            key = str(key_node.value) if isinstance(key_node, yaml.ScalarNode) else "?"
            line = key_node.start_mark.line + 1
            if key in seen and seen[key] != line:
                doc.duplicates.append(
                    (path + (key,), f"the key is written twice (lines {seen[key]} and {line})", line)
                )
            seen[key] = line
            child = path + (key,)
            doc.lines.setdefault(child, line)
            _walk(value_node, child, doc)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            child = path + (index,)
            doc.lines.setdefault(child, item.start_mark.line + 1)
            _walk(item, child, doc)
