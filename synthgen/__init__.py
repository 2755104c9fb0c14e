"""synthgen: object-detection test data whose right answer is known exactly.

Coordinate conventions are stated once, in :mod:`synthgen.geometry`.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
