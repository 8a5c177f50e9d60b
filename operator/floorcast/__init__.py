"""floorcast: replica floors for Kubernetes HPAs, raised ahead of forecast peaks."""

__version__ = "0.1.0"
