"""What every layer promises.

A layer is one class that keeps books; the arithmetic lives in module-level
functions (Numba kernels or NumPy) beside it.

* ``forward(x, training)`` returns the output and keeps exactly what
  ``backward`` needs (nothing when ``training`` is False, so inference keeps no
  references to large arrays);
* ``backward(grad_out)`` returns the gradient with respect to the input of the
  last training forward, and *sets* ``self.grads[key]`` for every key of
  ``self.params`` (same shape and dtype);
* ``params`` maps names (``"w"``, ``"b"``, ``"gamma"``, ``"beta"``) to arrays
  the optimiser updates in place; ``state`` maps names to arrays that are
  saved but not trained (batch norm's running statistics).

Shapes are NHWC, ``(n, h, w, c)`` for maps and ``(n, features)`` for vectors.
"""

from __future__ import annotations

import numpy as np


class Layer:
    """Base class: a layer with no parameters that passes its input through."""

    kind = "identity"

    def __init__(self) -> None:
        self.params: dict[str, np.ndarray] = {}
        self.grads: dict[str, np.ndarray] = {}
        self.state: dict[str, np.ndarray] = {}
        self.name = self.kind

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        return x

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return grad_out

    def astype(self, dtype) -> "Layer":
        """Cast parameters and state to ``dtype`` in place (float64 for checks)."""
        for store in (self.params, self.state):
            for key, value in store.items():
                store[key] = value.astype(dtype)
        self.grads = {}
        return self

    def __repr__(self) -> str:
        shapes = ", ".join(f"{k}={v.shape}" for k, v in self.params.items())
        return f"{type(self).__name__}({self.name}{'; ' + shapes if shapes else ''})"
