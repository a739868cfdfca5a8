"""The array type names used in the package's annotations, defined once.

A leaf module: it imports only numpy, so every layer (the arrays-only core included) may import
it.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["Array"]

#: A float64 array of any shape: what the numerical code computes with.
Array = NDArray[np.float64]
