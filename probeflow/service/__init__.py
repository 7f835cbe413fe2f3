"""The running service: pipeline, store workers, structured logs.

Names are imported on first use so that ``probeflow.service.log`` stays light.
"""

from __future__ import annotations

from typing import Any

__all__ = ["Log", "RateLimiter", "Service", "ServiceStats", "build_service"]


def __getattr__(name: str) -> Any:
    if name in ("Log", "RateLimiter"):
        from probeflow.service import log

        return getattr(log, name)
    if name in ("Service", "ServiceStats", "build_service"):
        from probeflow.service import pipeline

        return getattr(pipeline, name)
    raise AttributeError(name)
