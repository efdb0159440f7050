"""tumble: principal-axis or tumbling? Asteroid light-curve analysis.

The package is usable from Python without the command line::

    from tumble.photometry import read_lightcurve
    lc = read_lightcurve("night1.csv")

Sub-modules are imported lazily so that ``import tumble`` stays cheap.
"""

from __future__ import annotations

__version__ = "0.1.0.dev0"

__all__ = ["__version__"]
