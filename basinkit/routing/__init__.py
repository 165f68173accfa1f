"""The routing room: :func:`route` builds the :class:`FlowModel` (D8 receivers and stack,
D-infinity and MFD proportions) that every later analysis reads."""

from .flow_model import FlowModel, route

__all__ = ["FlowModel", "route"]
