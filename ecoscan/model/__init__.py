"""The small data model shared by every layer: :class:`~ecoscan.model.points.PointSet`."""
