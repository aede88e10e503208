"""Report previews keep the colours of the image (one stretch for all bands)."""

import numpy as np
import rasterio
from rasterio.transform import from_origin

from ecoscan.survey.thumbnails import preview


def test_preview_keeps_soil_brown_and_crowns_green(tmp_path):
    # brown soil (R > G > B) with bright green discs: a per-band stretch would turn the soil
    # magenta, because the crowns widen the green band's range (the bug this guards against)
    img = np.empty((3, 200, 200), dtype=np.uint8)
    img[0], img[1], img[2] = 150, 118, 88
    yy, xx = np.mgrid[:200, :200]
    for cx, cy in ((50, 50), (150, 120), (90, 160)):
        disc = (xx - cx) ** 2 + (yy - cy) ** 2 < 15**2
        img[0][disc], img[1][disc], img[2][disc] = 58, 200, 46
    path = tmp_path / "rgb.tif"
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=200,
        height=200,
        count=3,
        dtype="uint8",
        transform=from_origin(0, 20, 0.1, 0.1),
        crs="EPSG:32631",
    ) as dst:
        dst.write(img)
    out, extent = preview(str(path), (0, 0, 20, 20), rgb=True, max_side=100)
    assert out.shape == (100, 100, 3)
    assert extent == (0.0, 20.0, 0.0, 20.0)
    soil = out[5, 5]
    crown = out[25, 25]
    assert soil[0] > soil[1] > soil[2]
    assert crown[1] > crown[0] and crown[1] > crown[2]
