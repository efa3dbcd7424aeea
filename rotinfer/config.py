"""Configuration: TOML files mapped onto each stage's frozen config dataclass.

Each pipeline stage owns a small frozen dataclass of options with documented
defaults (``PrepareConfig`` in :mod:`rotinfer.prepare`, and so on). A TOML file
has one table per stage (``[prepare]``, ``[periodogram]``, ...); this module
reads the file and builds each dataclass, rejecting unknown keys with the list
of allowed ones. ``configs/default.toml`` documents every default.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import tomllib
import types
import typing
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TypeVar

from .errors import ConfigError

__all__ = ["config_hash", "dataclass_from_mapping", "dataclass_to_dict", "read_toml"]

T = TypeVar("T")


def read_toml(path: str | Path) -> dict[str, Any]:
    """Read a TOML configuration file.

    Raises
    ------
    ConfigError
        If the file is missing, unreadable or not valid TOML (one line, naming the file).
    """
    path = Path(path)
    try:
        with path.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"{path}: configuration file not found") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a directory, not a configuration file") from None
    except PermissionError:
        raise ConfigError(f"{path}: permission denied") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a text file") from None


def _coerce(value: Any, annotation: Any, where: str) -> Any:
    """Convert a TOML value to the dataclass field's declared type (a small, strict subset)."""
    origin = typing.get_origin(annotation)
    args = typing.get_args(annotation)
    if origin in (typing.Union, types.UnionType):
        if value is None and type(None) in args:
            return None
        errors = []
        for arg in args:
            if arg is type(None):
                continue
            try:
                return _coerce(value, arg, where)
            except ConfigError as exc:
                errors.append(str(exc))
        raise ConfigError(errors[0] if errors else f"{where}: invalid value {value!r}")
    if origin is typing.Literal:
        if value not in args:
            allowed = ", ".join(repr(a) for a in args)
            raise ConfigError(f"{where}: {value!r} is not allowed; choose one of {allowed}")
        return value
    if origin is tuple:
        if not isinstance(value, list | tuple):
            raise ConfigError(f"{where}: expected a list, got {value!r}")
        inner = args[0] if args else Any
        return tuple(_coerce(v, inner, where) for v in value)
    if annotation is bool:
        if not isinstance(value, bool):
            raise ConfigError(f"{where}: expected true or false, got {value!r}")
        return value
    if annotation is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{where}: expected an integer, got {value!r}")
        return value
    if annotation is float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ConfigError(f"{where}: expected a number, got {value!r}")
        return float(value)
    if annotation is str:
        if not isinstance(value, str):
            raise ConfigError(f"{where}: expected a string, got {value!r}")
        return value
    if dataclasses.is_dataclass(annotation):
        if not isinstance(value, Mapping):
            raise ConfigError(f"{where}: expected a table, got {value!r}")
        return dataclass_from_mapping(annotation, value, section=where)
    return value


def dataclass_from_mapping(cls: type[T], mapping: Mapping[str, Any] | None, *, section: str) -> T:
    """Build a frozen config dataclass from a mapping, strictly.

    Parameters
    ----------
    cls : dataclass type
        The stage's config class; its field defaults fill in missing keys.
    mapping : mapping or None
        Values read from TOML (``None`` gives all defaults).
    section : str
        Name used in messages, e.g. ``"prepare"``.

    Raises
    ------
    ConfigError
        For unknown keys (listing the allowed ones) or values of the wrong type.
    """
    mapping = dict(mapping or {})
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init}
    unknown = sorted(set(mapping) - set(fields))
    if unknown:
        allowed = ", ".join(sorted(fields))
        raise ConfigError(
            f"[{section}]: unknown option(s) {', '.join(unknown)}; allowed: {allowed}"
        )
    hints = typing.get_type_hints(cls)
    kwargs = {
        name: _coerce(value, hints[name], f"[{section}] {name}") for name, value in mapping.items()
    }
    try:
        return cls(**kwargs)
    except ConfigError:
        raise
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"[{section}]: {exc}") from None


def dataclass_to_dict(obj: Any) -> Any:
    """A JSON/TOML-friendly representation of a (nested) config dataclass."""
    if dataclasses.is_dataclass(obj):
        return {f.name: dataclass_to_dict(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, tuple | list):
        return [dataclass_to_dict(v) for v in obj]
    return obj


def config_hash(obj: Any) -> str:
    """Stable short hash (SHA-256, 16 hex digits) of a configuration, for resume and provenance."""
    text = json.dumps(dataclass_to_dict(obj), sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]
