"""Where simulated readings go: files, MQTT, a pseudo-terminal, or the service in-process."""

from probeflow.simulate.outputs.base import Output

__all__ = ["Output"]
