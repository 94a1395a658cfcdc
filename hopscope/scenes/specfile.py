"""Scene descriptions from files: TOML tables (or nested dicts) named like the parts of a :class:`SceneSpec`.

Every value is checked by the spec's own dataclasses; an unknown table or field is rejected with a message
that names the file (``source``) and the part.
"""

from __future__ import annotations

import dataclasses
import functools
import tomllib
from pathlib import Path
from typing import Any

from .spec import DropSpec, SceneSpec

#: The spec's parts by table name (every part but the optional drop has a default factory).
_PART_TYPES: dict[str, type] = {
    f.name: (DropSpec if f.name == "drop" else type(f.default_factory()))  # type: ignore[misc, operator]
    for f in dataclasses.fields(SceneSpec)
    if f.name == "drop" or f.default_factory is not dataclasses.MISSING
}


def _build(cls: type, data: Any, where: str) -> Any:
    if not isinstance(data, dict):
        raise ValueError(f"{where}: expected a table of fields, got {type(data).__name__}")
    fields = {f.name: f for f in dataclasses.fields(cls)}
    unknown = sorted(set(data) - set(fields))
    if unknown:
        raise ValueError(f"{where}: unknown field(s) {', '.join(unknown)}; known: {', '.join(fields)}")
    kwargs = {}
    for key, value in data.items():
        if isinstance(value, list):
            value = tuple(value)
        kwargs[key] = value
    try:
        return cls(**kwargs)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{where}: {exc}") from exc


def spec_from_dict(data: dict[str, Any], *, source: str = "scene") -> SceneSpec:
    """A :class:`SceneSpec` from nested dicts (as in ``SceneSpec.to_dict()`` or a TOML file).

    Missing parts and fields take their defaults; ``drop`` may be absent or empty (no drop clip). Unknown
    keys are rejected with a message that names ``source`` and the part.
    """
    if not isinstance(data, dict):
        raise ValueError(f"{source}: expected a table, got {type(data).__name__}")
    top = {f.name for f in dataclasses.fields(SceneSpec)}
    unknown = sorted(set(data) - top)
    if unknown:
        raise ValueError(f"{source}: unknown field(s) {', '.join(unknown)}; known: {', '.join(sorted(top))}")
    kwargs: dict[str, Any] = {}
    for key, value in data.items():
        if key in _PART_TYPES:
            if key == "drop" and (value is None or value == {}):
                kwargs[key] = None
                continue
            kwargs[key] = _build(_PART_TYPES[key], value, f"{source} [{key}]")
        else:
            kwargs[key] = value
    try:
        return SceneSpec(**kwargs)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{source}: {exc}") from exc


def load_scene(path) -> SceneSpec:
    """Read a scene description from a TOML file (tables named like the spec's parts)."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise OSError(f"{p}: cannot read scene file ({exc.strerror or exc})") from exc
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ValueError(f"{p}: not a valid TOML scene file ({exc})") from exc
    return spec_from_dict(data, source=str(p))


#: Folder of the built-in scenes' TOML files (package data).
BUILTIN_FOLDER = Path(__file__).resolve().parent / "builtin"


@functools.cache
def packaged_scene(name: str) -> SceneSpec:
    """The scene described by the package's own ``builtin/<name>.toml``."""
    return load_scene(BUILTIN_FOLDER / f"{name}.toml")
