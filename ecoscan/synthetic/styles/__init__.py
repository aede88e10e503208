"""The scene styles: one builder per style, each ``builder(size_px, seed) -> ScenePlan``."""

from __future__ import annotations

from ecoscan.synthetic.styles.cropland import row_crop
from ecoscan.synthetic.styles.forest import closed_canopy, conifer_pasture
from ecoscan.synthetic.styles.rangeland import dry_shrubs, rocky_shrubland
from ecoscan.synthetic.styles.sensors import coarse, jpeg_vignette, multispectral

__all__ = ["BUILDERS", "SCENE_STYLES"]

#: Style name -> one-line description.
SCENE_STYLES: dict[str, str] = {
    "dry-shrubs": "green, dry and grey shrubs mixed on mottled soil, cast shadows (0.05 m)",
    "conifer-pasture": "dark conifers on green pasture: planted rows with gaps plus "
    "regeneration (0.08 m)",
    "rocky-shrubland": "shrubs with hard shadows among dark rocks, litter and tyre ruts (0.05 m)",
    "row-crop": "rosette crop in rows with straw mulch and small weeds between rows (0.02 m)",
    "multispectral": "4-band uint16 blue, green, red, NIR with an illumination gradient "
    "and a cloud shadow (0.08 m)",
    "closed-canopy": "touching and overlapping broadleaf crowns of 2-7 m, three species (0.1 m)",
    "jpeg-vignette": "8-bit JPEG-compressed orthomosaic with per-frame vignetting (0.04 m)",
    "coarse": "savanna trees at 0.25 m pixels, smallest crowns about 4 px across",
}

BUILDERS = {
    "dry-shrubs": dry_shrubs,
    "conifer-pasture": conifer_pasture,
    "rocky-shrubland": rocky_shrubland,
    "row-crop": row_crop,
    "multispectral": multispectral,
    "closed-canopy": closed_canopy,
    "jpeg-vignette": jpeg_vignette,
    "coarse": coarse,
}
