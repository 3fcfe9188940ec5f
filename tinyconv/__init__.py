"""tinyconv: choose a small image classifier for a device budget, with evidence.

The engine (layers, training, gradient checks), data intake, the cost model,
the int8 export and the reports live here; the search lives in the sibling
package :mod:`search`. Importing this package compiles nothing: Numba kernels
compile lazily on first use and are cached on disk.
"""

__version__ = "0.1.0"
