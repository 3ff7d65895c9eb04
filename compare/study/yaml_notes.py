"""YAML text of a plain document with comments: what ``fluidgap fit`` writes.

PyYAML drops comments, so the document (nested dicts, lists and scalars, as read from a
scenario) is written here in block style with comments at given paths: ``above[path]``, lines
written before the key at ``path``; ``after[path]``, a comment on the same line. A path is a
tuple of keys and list indices. A mapping whose values are all scalars, or a list of scalars
without comments, is written in flow style on one line (``{dist: gamma, mean: 4.2, cv: 0.8}``).
"""

from __future__ import annotations

import json
import math
import re
from typing import Any

__all__ = ["to_yaml", "scalar"]

_PLAIN = re.compile(r"[A-Za-z_][A-Za-z0-9_./-]*\Z")
_SPECIAL = {"true", "false", "yes", "no", "on", "off", "null", "y", "n", "~"}


def scalar(value: Any) -> str:
    """One scalar as YAML (strings quoted as JSON unless plain words)."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError("YAML output holds finite numbers only")
        return repr(value)
    text = str(value)
    if _PLAIN.match(text) and text.lower() not in _SPECIAL:
        return text
    return json.dumps(text, ensure_ascii=False)


def _key(key: Any) -> str:
    return scalar(key)  # (quoted when it would read as something else: yes, null, 1e3, ...)


def _is_scalar(v: Any) -> bool:
    return not isinstance(v, (dict, list))


def _flow(value: Any) -> str | None:
    if isinstance(value, dict) and all(_is_scalar(v) for v in value.values()):
        return "{" + ", ".join(f"{_key(k)}: {scalar(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list) and all(_is_scalar(v) for v in value):
        return "[" + ", ".join(scalar(v) for v in value) + "]"
    if isinstance(value, dict) and all(
            _is_scalar(v) or (isinstance(v, (dict, list)) and _flow_simple(v))
            for v in value.values()) and len(value) <= 4:
        parts = [f"{_key(k)}: {scalar(v) if _is_scalar(v) else _flow(v)}"
                 for k, v in value.items()]
        text = "{" + ", ".join(parts) + "}"
        return text if len(text) <= 88 else None
    return None


def _flow_simple(v) -> bool:
    return (isinstance(v, dict) and all(_is_scalar(x) for x in v.values())) or (
        isinstance(v, list) and all(_is_scalar(x) for x in v))


def _comment(text: str) -> str:
    return "# " + text.replace("\n", " ")


def _commented_inside(path: tuple, above: dict, after: dict) -> bool:
    n = len(path)
    return any(len(p) > n and p[:n] == path for p in (*above, *after))


def _emit(value: Any, path: tuple, indent: int, above: dict, after: dict,
          out: list[str]) -> None:
    pad = " " * indent
    if isinstance(value, dict):
        for k, v in value.items():
            p = path + (k,)
            for line in above.get(p, ()):
                out.append(pad + _comment(line))
            tail = f"  {_comment(after[p])}" if p in after else ""
            flow = None if _commented_inside(p, above, after) else (
                scalar(v) if _is_scalar(v) else _flow(v))
            if flow is not None:
                out.append(f"{pad}{_key(k)}: {flow}{tail}")
            elif isinstance(v, (dict, list)) and not v:
                out.append(f"{pad}{_key(k)}: {'{}' if isinstance(v, dict) else '[]'}{tail}")
            else:
                out.append(f"{pad}{_key(k)}:{tail}")
                _emit(v, p, indent + 2, above, after, out)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            p = path + (i,)
            for line in above.get(p, ()):
                out.append(pad + _comment(line))
            tail = f"  {_comment(after[p])}" if p in after else ""
            if _is_scalar(v):
                out.append(f"{pad}- {scalar(v)}{tail}")
            else:
                flow = None if _commented_inside(p, above, after) else _flow(v)
                if flow is not None:
                    out.append(f"{pad}- {flow}{tail}")
                else:
                    out.append(f"{pad}-{tail}")
                    _emit(v, p, indent + 2, above, after, out)
    else:
        out.append(pad + scalar(value))


def to_yaml(doc: dict, *, header: list[str] = (), above: dict | None = None,
            after: dict | None = None) -> str:
    """The YAML text of ``doc`` with the ``header`` comment lines first and the comments at
    the paths of ``above`` and ``after`` (see the module docstring)."""
    out = [_comment(line) for line in header]
    _emit(doc, (), 0, above or {}, after or {}, out)
    return "\n".join(out) + "\n"
