"""JSON has no inf or nan: the one place that turns figures into what JSON can hold.

:func:`json_number` makes one number JSON-ready (inf and nan become None); :func:`json_ready`
walks a whole document (mappings, lists and tuples, numpy scalars and arrays, pandas tables and
missing values, objects with ``to_json()`` or ``to_dict()``). Every package's ``to_json`` and the
command line's ``--json`` use them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["json_number", "json_ready"]


def json_number(x: Any) -> float | None:
    """``x`` as a float, or None when it is None, infinite or not a number."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def json_ready(obj: Any) -> Any:
    """``obj`` with inf and nan turned into None, numpy scalars and arrays into Python numbers
    and lists, tuples into lists, DataFrames into lists of records and objects with a
    ``to_json()`` or ``to_dict()`` returning a dict into that dict. Anything else JSON cannot
    hold is left for :func:`json.dumps` to name."""
    if isinstance(obj, Mapping):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    if obj is None or isinstance(obj, str):
        return obj
    frame = type(obj).__name__ == "DataFrame" and hasattr(obj, "to_dict")
    if frame:  # pandas, without importing it here
        return json_ready(obj.to_dict("records"))
    if type(obj).__name__ in ("NAType", "NaTType"):
        return None
    for method in ("to_json", "to_dict"):
        f = getattr(obj, method, None)
        if callable(f):
            out = f()
            if isinstance(out, Mapping):
                return json_ready(out)
    return obj
