"""One converter of results to strict JSON: numpy types to Python, non-finite numbers to null."""

import math

import numpy as np

__all__ = ["json_safe"]


def json_safe(x):
    """Nested dict/list/number with numpy types converted and nan/inf as None.

    Dict keys become strings; tuples become lists; numpy scalars and 0-d
    arrays become Python numbers; anything else is returned as it is.
    """
    if isinstance(x, dict):
        return {str(k): json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [json_safe(v) for v in x]
    if isinstance(x, np.ndarray) and x.ndim == 0:
        x = x[()]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(x) else None
    return x
