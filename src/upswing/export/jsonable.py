"""Turn result objects into JSON per the conventions: matrices as lists of rows, complex numbers as [re, im]."""

from __future__ import annotations

import dataclasses
import json
import math
from typing import Any

import numpy as np


def jsonable(value: Any) -> Any:
    """Recursively convert numpy arrays, complex numbers, tuples and dataclasses to plain JSON values.

    Non-finite floats become ``null`` (strict JSON has no NaN or Infinity); complex numbers become ``[re, im]``.
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, (complex, np.complexfloating)):
        return [jsonable(float(value.real)), jsonable(float(value.imag))]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


def dumps(value: Any) -> str:
    """Strict JSON text (no NaN/Infinity) of :func:`jsonable` ``(value)``, indented for people."""
    return json.dumps(jsonable(value), indent=2, allow_nan=False)
