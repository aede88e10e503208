"""Presentation, the only layer that draws: ``html`` (the HTML report frame), ``figures/``
(PNG figures) and ``tables`` (terminal tables)."""
