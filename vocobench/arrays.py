"""Array conversion shared by the stages and the plug-in adapters (no vocobench imports)."""
from __future__ import annotations

from typing import Any

import numpy as np


def to_numpy(x: Any) -> np.ndarray:
    """Array-like (numpy, list, torch tensor on any device or dtype) to a numpy array."""
    if hasattr(x, "detach") and hasattr(x, "cpu"):        # torch.Tensor, without importing torch
        x = x.detach().cpu()
        if not str(getattr(x, "dtype", "")).startswith(("torch.float64", "torch.int")):
            x = x.float()
        return x.numpy()
    return np.asarray(x)
