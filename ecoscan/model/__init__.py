"""The small data model shared by every layer, with no file access.

``points`` (:class:`~ecoscan.model.points.PointSet`: plant positions in metres with their
attributes and CRS), ``plots`` (:class:`~ecoscan.model.plots.Plot`,
:class:`~ecoscan.model.plots.PlotLayer`) and ``membership``
(:class:`~ecoscan.model.membership.PlotMembership`: which plants lie in which plots).
"""
