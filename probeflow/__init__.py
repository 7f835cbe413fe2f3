"""probeflow: pH you can trust from electrode millivolts and temperature.

Pipeline: collectors -> conversion -> rules -> stores.  See README.md.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__"]
