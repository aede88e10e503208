"""Tiles that hold only nodata are skipped after reading their mask alone."""

import numpy as np
import rasterio
from detect_helpers import UTM, chm_scene

from ecoscan.detect import DetectionSettings, detect_raster
from ecoscan.synthetic import write_geotiff


def test_nodata_tiles_read_only_their_mask(tmp_path, monkeypatch):
    path, _truth = chm_scene(tmp_path, shape=(256, 256))
    with rasterio.open(path) as src:
        chm = src.read(1)
        transform = src.transform
    # the same crowns in the top-left corner of a raster eight times as wide, the rest nodata
    wide = np.full((256, 2048), -9999.0, dtype=np.float32)
    wide[:, :256] = chm
    big = write_geotiff(tmp_path / "wide.tif", wide, transform, UTM, nodata=-9999.0)
    import ecoscan.detect.engine as engine

    reads = []
    real = engine.read_window

    def counting(info, bands, window, **kw):
        data, valid = real(info, bands, window, **kw)
        if data is not None:  # pixels were read (read_window returns None before reading)
            reads.append(window)
        return data, valid

    monkeypatch.setattr(engine, "read_window", counting)
    settings = DetectionSettings(tile_size_px=256)
    res = detect_raster(big, settings)
    big_reads = list(reads)
    small = detect_raster(path, settings)
    # of the eight tiles, only those whose window (core plus overlap) touches the data were
    # read: the first two
    assert len(big_reads) == 2
    assert all(w[0] < 256 for w in big_reads)
    # and the plants found are the same as in the raster without the nodata part
    assert res.n == small.n
    np.testing.assert_allclose(np.sort(res.points.x), np.sort(small.points.x), atol=1e-6)
