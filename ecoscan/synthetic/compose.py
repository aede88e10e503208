"""Compose a scene strip: ground, ground objects, cast shadows, crowns, camera effects.

A :class:`Recipe` is everything a style decided from its seed. :meth:`Recipe.render` draws
image rows ``[r0, r1)`` in the scene's final data type; rows outside are only read as a
halo for the optical blur, so strips join without seams and any strip is reproducible.
"""

from __future__ import annotations

import io
import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ecoscan.synthetic.crowns import Stamps, Sun, cast_shadows, draw_stamps
from ecoscan.synthetic.noise import pixel_gauss

__all__ = ["STRIP_ROWS", "Recipe"]

#: Rows rendered at once. Fixed (a multiple of the 16-pixel JPEG macroblock), so every
#: strip, and therefore every JPEG-compressed block, is the same however the scene is read.
STRIP_ROWS = 512

#: (r0, r1) -> float32 array (bands, r1 - r0, width)
GroundFn = Callable[[int, int], np.ndarray]
#: (image strip, first row) -> None, modifies the strip in place
EffectFn = Callable[[np.ndarray, int], None]


@dataclass(frozen=True, eq=False)
class Recipe:
    """Everything needed to draw any strip of a scene.

    Attributes
    ----------
    width, height : int
        Raster size in pixels.
    ground : callable
        ``ground(r0, r1)`` returns the bare background of rows ``[r0, r1)`` as float32
        (bands, rows, width) in the style's working unit (digital numbers).
    ground_objects : tuple of Stamps
        Objects lying on the ground (rocks, weeds): drawn before shadows fall.
    crowns : tuple of Stamps
        Plant crowns: drawn after the shadows, largest on top.
    casters : tuple of Stamps
        Objects that cast shadows (usually the crowns and rocks).
    sun : Sun
        One sun for the whole scene.
    shadow_strength : tuple of float
        Darkening of the ground in full shadow, per band (0–1); shadows are bluish, so red
        and near-infrared usually lose more than blue.
    shadow_soft_px : float
        Penumbra width in pixels.
    texture_px : (float, float)
        Crown texture feature sizes in pixels.
    effects : tuple of callable
        Camera and atmosphere effects applied to the float strip (illumination gradient,
        cloud shadow, vignetting), each ``effect(strip, r0)`` in place.
    blur_px : float
        Standard deviation of the optical blur (pixels); 0 for none.
    noise_dn : tuple of float
        Sensor noise standard deviation per band, in digital numbers.
    dtype : str
        ``uint8`` or ``uint16``.
    jpeg_quality : int or None
        Pass each strip through a baseline JPEG codec (Pillow) at this quality.
    seed : int
        Texture stream number.
    """

    width: int
    height: int
    ground: GroundFn
    crowns: tuple[Stamps, ...]
    casters: tuple[Stamps, ...]
    sun: Sun
    ground_objects: tuple[Stamps, ...] = ()
    shadow_strength: tuple[float, ...] = (0.55, 0.5, 0.42)
    shadow_soft_px: float = 1.5
    texture_px: tuple[float, float] = (2.5, 7.0)
    effects: tuple[EffectFn, ...] = field(default_factory=tuple)
    blur_px: float = 0.5
    noise_dn: tuple[float, ...] = (3.0, 3.0, 3.0)
    dtype: str = "uint8"
    jpeg_quality: int | None = None
    seed: int = 0

    def render(self, r0: int, r1: int) -> np.ndarray:
        """Draw rows ``[r0, r1)``.

        Parameters
        ----------
        r0, r1 : int
            First and one-past-last image row.

        Returns
        -------
        numpy.ndarray
            Shape (bands, r1 − r0, width) in :attr:`dtype`.

        Examples
        --------
        >>> from ecoscan.synthetic import make_scene
        >>> sc = make_scene("coarse", 64, 0)
        >>> sc.recipe.render(10, 20).shape
        (3, 10, 64)
        """
        halo = math.ceil(4 * self.blur_px) + 1 if self.blur_px > 0 else 0
        a0, a1 = max(0, r0 - halo), min(self.height, r1 + halo)
        img = self.ground(a0, a1).astype(np.float32, copy=False)
        for k, st in enumerate(self.ground_objects):
            draw_stamps(img, st, a0, self.sun, self.seed * 17 + 100 + k, texture_px=(1.5, 4.0))
        shade = np.zeros(img.shape[1:], np.float32)
        for k, st in enumerate(self.casters):
            cast_shadows(
                shade, st, a0, self.sun, self.seed * 17 + 200 + k, soft_px=self.shadow_soft_px
            )
        strength = np.asarray(self.shadow_strength, np.float32)[:, None, None]
        img *= 1.0 - strength * shade[None]
        for k, st in enumerate(self.crowns):
            draw_stamps(
                img,
                st,
                a0,
                self.sun,
                self.seed * 17 + 300 + k,
                texture_px=self.texture_px,
                shade=shade,
                shade_strength=0.5 * float(strength.mean()),
            )
        del shade
        for fx in self.effects:
            fx(img, a0)
        if self.blur_px > 0:
            for b in range(img.shape[0]):
                img[b] = ndimage.gaussian_filter(img[b], self.blur_px, mode="nearest")
        img = img[:, r0 - a0 : r1 - a0]
        for b in range(img.shape[0]):
            img[b] += np.float32(self.noise_dn[b]) * pixel_gauss(
                (r0, r1), (0, self.width), self.seed * 17 + 400 + b
            )
        top = 255 if self.dtype == "uint8" else 65535
        out = np.clip(np.rint(img), 0, top).astype(self.dtype)
        if self.jpeg_quality is not None:
            out = jpeg_roundtrip(out, self.jpeg_quality)
        return out


def jpeg_roundtrip(rgb: np.ndarray, quality: int) -> np.ndarray:
    """Encode an 8-bit RGB block as baseline JPEG (4:2:0 chroma) with Pillow and decode it.

    Parameters
    ----------
    rgb : numpy.ndarray
        uint8, shape (3, rows, columns).
    quality : int
        JPEG quality 1–95 (libjpeg scale).

    Returns
    -------
    numpy.ndarray
        The decoded pixels, uint8, same shape.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.random.default_rng(0).integers(0, 255, (3, 32, 32), dtype=np.uint8)
    >>> b = jpeg_roundtrip(a, 50)
    >>> b.shape == a.shape and not np.array_equal(a, b)
    True
    """
    from PIL import Image  # Pillow: a dependency of matplotlib

    buf = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(rgb.transpose(1, 2, 0)), "RGB").save(
        buf, format="JPEG", quality=int(quality), subsampling=2
    )
    buf.seek(0)
    with Image.open(buf) as im:
        dec = np.asarray(im.convert("RGB"))
    return np.ascontiguousarray(dec.transpose(2, 0, 1))
