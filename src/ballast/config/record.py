"""A read-only view of a config that records every key read through it.

A stage runs against such a view; the pipeline compares the keys read with the keys the stage
declares (its fingerprint covers those), so a stage that starts reading a new key without
declaring it is caught by the tests instead of serving stale results later.

Reading a field records its dotted key (``train.epochs``); reading a section returns a view of
that section; anything else on a section (a method or property such as ``guard.enabled``)
records the whole section, and on the top level the whole config (``*``), except ``run_path``
(which depends on ``run_dir`` and ``name``).
"""

from __future__ import annotations

import dataclasses
from typing import Any

ALL = "*"
_FIELDS: dict[type, frozenset[str]] = {}  # field names per config class, looked up once


def _fields(obj: Any) -> frozenset[str]:
    names = _FIELDS.get(type(obj))
    if names is None:
        names = _FIELDS[type(obj)] = frozenset(f.name for f in dataclasses.fields(obj))
    return names


class ConfigView:
    __slots__ = ("_obj", "_prefix", "_reads")

    def __init__(self, obj: Any, reads: set[str], prefix: str = "") -> None:
        object.__setattr__(self, "_obj", obj)
        object.__setattr__(self, "_prefix", prefix)
        object.__setattr__(self, "_reads", reads)

    def __getattr__(self, name: str) -> Any:
        obj, prefix, reads = self._obj, self._prefix, self._reads
        value = getattr(obj, name)
        if name in _fields(obj):
            key = prefix + name
            if dataclasses.is_dataclass(value) and not isinstance(value, type):
                return ConfigView(value, reads, key + ".")
            reads.add(key)
        elif not prefix and name == "run_path":
            reads.update(("run_dir", "name"))
        else:
            reads.add(prefix.rstrip(".") or ALL)
        return value

    def __setattr__(self, name: str, value: Any) -> None:
        raise dataclasses.FrozenInstanceError(f"cannot assign to field {name!r}")

    def __repr__(self) -> str:
        return f"ConfigView({self._prefix or '<config>'})"


def unwrap(cfg: Any) -> Any:
    """The config object behind a view (itself when it is not a view), read without recording."""
    return object.__getattribute__(cfg, "_obj") if isinstance(cfg, ConfigView) else cfg


def section_dict(cfg: Any) -> dict[str, Any]:
    """A plain dict of a config section (or the whole config), recorded as read in full."""
    from . import _to_plain

    if isinstance(cfg, ConfigView):
        cfg._reads.add(cfg._prefix.rstrip(".") or ALL)
    return _to_plain(dataclasses.asdict(unwrap(cfg)))


def covered(key: str, declared: tuple[str, ...] | list[str]) -> bool:
    """Whether a read ``key`` falls under a declared key or section."""
    if ALL in declared:
        return True
    return any(key == d or key.startswith(d + ".") for d in declared)
