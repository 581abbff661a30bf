"""JSON files of the diagnostic reports (check, drift): plain values, NaN as null."""
import json
import math

import numpy as np

__all__ = ["json_safe", "write_json"]


def json_safe(x):
    """``x`` with NaN and infinities as None, numpy scalars and arrays as Python numbers
    and lists, and dict keys as strings (recursively), so that ``json.dump`` with
    ``allow_nan=False`` accepts it."""
    if isinstance(x, dict):
        return {str(k): json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple, np.ndarray)):
        return [json_safe(v) for v in x]
    if isinstance(x, np.generic):
        x = x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def write_json(data, path):
    """Write ``json_safe(data)`` to ``path`` (indent 1; a NaN left would raise)."""
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(json_safe(data), fh, indent=1, allow_nan=False)
