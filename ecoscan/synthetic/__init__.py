"""Synthetic rasters with known plant positions, for tests, benchmarks and demo data.

Everything here is invented. Two families:

* :mod:`ecoscan.synthetic.discs`: the original renderers (soft discs on textured soil,
  canopy-height domes, class maps), used by the demo data and most tests;
* the scene suite: :func:`make_scene` renders one of :data:`SCENE_STYLES`, survey-like
  scenes with lobed, textured, shaded crowns, cast shadows and the nuisances of each
  survey type, and :func:`write_scene` writes it with its truth for ``ecoscan validate``.
"""

from ecoscan.synthetic.discs import (
    place_crowns,
    render_chm,
    render_classes,
    render_orthomosaic,
    write_geotiff,
    write_orthomosaic_geotiff,
)
from ecoscan.synthetic.scene import Scene, ScenePaths, make_scene, training_plots, write_scene
from ecoscan.synthetic.styles import SCENE_STYLES

__all__ = [
    "SCENE_STYLES",
    "Scene",
    "ScenePaths",
    "make_scene",
    "place_crowns",
    "render_chm",
    "render_classes",
    "render_orthomosaic",
    "training_plots",
    "write_geotiff",
    "write_orthomosaic_geotiff",
    "write_scene",
]
