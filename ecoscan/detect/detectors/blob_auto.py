"""The imagery detector's automatic choices, made once on sample windows of the image.

Which layer separates plants from the background best and the thresholds that follow from
the background's robust statistics (:mod:`ecoscan.detect.autotune`), and the switch to the
closed-canopy watershed split when the sampled pixels look like a packed canopy
(:mod:`ecoscan.detect.canopy`).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ecoscan.detect.blobs import DISC_RESPONSE
from ecoscan.detect.detectors.base import no_plants
from ecoscan.detect.detectors.blob import (
    LAYER_LABELS,
    MIN_CANDIDATES,
    SPLIT_RATIO,
    BlobPlan,
    band_lookup,
)
from ecoscan.io.raster import RasterInfo
from ecoscan.model.notes import WARNING, Note

__all__ = ["SAMPLE_BUDGET_PX", "auto_imagery"]

#: Pixels read at full resolution to choose the layer and thresholds (sample windows).
SAMPLE_BUDGET_PX = 1_600_000


def _sample_windows(info: RasterInfo, bands: tuple[int, ...], scales, dmax_px: float):
    """Full-resolution windows spread over the raster, for layer and threshold statistics.

    The whole raster when it is small; otherwise up to 16 windows on a regular grid whose
    cores total about :data:`SAMPLE_BUDGET_PX` pixels, each read with a margin of the
    filters' reach so that its candidates are those of a whole-image run.
    """
    from ecoscan.detect.autotune import SampleWindow
    from ecoscan.io.raster import read_window

    margin = scales.support_px
    w, h = info.width, info.height
    if w * h <= SAMPLE_BUDGET_PX:
        data, valid = read_window(info, bands, (0, 0, w, h))
        return [SampleWindow(data, valid, (slice(0, h), slice(0, w)))]
    side = int(min(max(384, 6 * dmax_px), w, h))
    n = int(np.clip(SAMPLE_BUDGET_PX // (side * side), 1, 16))
    per = math.ceil(math.sqrt(n))
    spots = []
    for gy in range(per):
        for gx in range(per):
            cy = int((gy + 0.5) * h / per)
            cx = int((gx + 0.5) * w / per)
            c0 = int(np.clip(cx - side // 2, 0, w - side))
            r0 = int(np.clip(cy - side // 2, 0, h - side))
            win = (
                max(0, c0 - margin),
                max(0, r0 - margin),
                min(w, c0 + side + margin),
                min(h, r0 + side + margin),
            )
            core = (slice(r0 - win[1], r0 - win[1] + side), slice(c0 - win[0], c0 - win[0] + side))
            spots.append((win, core))
    out = []
    for (data, valid), (_win, core) in zip(_read_all(info, bands, spots), spots, strict=True):
        if valid[core].mean() > 0.2:
            out.append(SampleWindow(data, valid, core))
    if not out:  # mostly nodata: take the whole raster decimated would lose crowns; use any
        data, valid = read_window(info, bands, (0, 0, min(w, 2 * side), min(h, 2 * side)))
        out.append(SampleWindow(data, valid, (slice(0, data.shape[1]), slice(0, data.shape[2]))))
    return out


#: Threads that read the sample windows (GDAL decodes without holding Python's lock; the
#: tile workers are still idle then).
READ_THREADS = 2


def _read_all(info: RasterInfo, bands: tuple[int, ...], spots) -> list:
    """``read_window`` of every ``(window, core)`` spot, in order, on a few threads."""
    from concurrent.futures import ThreadPoolExecutor

    from ecoscan.io.raster import read_window

    if len(spots) < 2:
        return [read_window(info, bands, win) for win, _core in spots]
    with ThreadPoolExecutor(min(READ_THREADS, len(spots))) as ex:
        return list(ex.map(lambda spot: read_window(info, bands, spot[0]), spots))


def _canopy_record(abands, roles, evidence, split) -> dict:
    """What the closed-canopy path records in the detection metadata."""
    from ecoscan.detect import canopy

    return {
        "layer": "canopy",
        "layer_bands": list(abands),
        "layer_roles": list(roles),
        "layer_chosen_by": (
            "closed-canopy rule on sample windows: green share (chromatic Excess Green > "
            f"{canopy.GREEN_EXG:g}) >= {canopy.CLOSED_GREEN_SHARE:g} and brightness-greenness "
            f"correlation > {canopy.CLOSED_MIN_CORR:g}, or green share >= "
            f"{canopy.PACKED_GREEN_SHARE:g} and correlation >= {canopy.PACKED_MIN_CORR:g}; "
            f"either only with open ground (bright, > {canopy.OPEN_REACH:g} largest crown "
            f"radii from dark) below {canopy.MAX_OPEN_SHARE:g}"
        ),
        "canopy_green_share": evidence["green_share"],
        "canopy_bright_green_corr": evidence["bright_green_corr"],
        "canopy_open_share": evidence["open_share"],
        "canopy_layer": "log(1 + green band), Gaussian smoothed",
        "canopy_smooth_px": split.smooth_px,
        "canopy_marker_h": split.h,
        "canopy_marker_h_from": (
            f"{canopy.H_SHARE:g} x robust SD (1.4826 MAD) of the smoothed layer on sample windows"
        ),
        "canopy_min_area_px": split.min_area_px,
        "canopy_join_fragments": split.merge,
        "canopy_lean_radii": [split.lean_col, split.lean_row],
        "canopy_lean_from": (
            f"median over sampled regions of {canopy.LEAN_SHARE:g} x the step between the "
            f"centroids of the level sets {canopy.LEAN_LEVELS[0]:g} and "
            f"{canopy.LEAN_LEVELS[1]:g} of the way from floor to peak (Lambert dome), "
            f"times {canopy.DOME_LEAN_GAIN:g} with shaded domes"
        ),
        "canopy_lean_gain": split.lean_gain,
        "canopy_colour_edge_gain": split.edge_gain,
        "canopy_colour_edge_from": (
            f"with shaded domes; the layer minus {canopy.EDGE_GAIN:g} x sigma x the gradient "
            "magnitude of the chromaticity (r and b shares), sigma "
            f"{canopy.EDGE_SHARE:g} x the smallest crown radius"
        ),
        "canopy_join_crown_scale": split.crown_join,
        "canopy_join_crown_scale_from": (
            f"on when the lean reaches {canopy.MIN_DOME_LEAN:g} radii (shaded domes); joins "
            f"neighbours meeting >= {canopy.CROWN_SCALE_PASS:g} of the way up on the layer "
            f"smoothed at {canopy.CROWN_SCALE_SHARE:g} x the larger region's radius"
        ),
        # with the same gate: neighbours that are one blob at their union's scale
        "canopy_join_one_blob": split.crown_join,
        "canopy_join_one_blob_from": (
            "with shaded domes; joins neighbours whose centres lie within "
            f"{canopy.BLOB_JOIN_REACH:g} union radii when the scale-normalised blob response "
            f"at their midpoint beats {canopy.BLOB_JOIN_RATIO:g} x the weaker one's own"
        ),
        # regions whose smoothed peak stays below this are gaps (-inf: none dropped)
        "canopy_min_peak": split.min_peak if math.isfinite(split.min_peak) else None,
        "canopy_min_peak_from": (
            "median of the smoothed layer on sample windows, with shaded domes (a crown's "
            "lit top rises above it, a gap does not)"
        ),
        "weak_separation": False,
        "split_touching": True,
    }


def _closed_canopy(info, settings, windows, roles, abands, scales, overlap, notes, seen=None):
    """The closed-canopy path (:mod:`ecoscan.detect.canopy`) when the switch rule fires.

    ``seen`` (a dict), when given, receives the rule's figures whether it fires or not.
    """
    from ecoscan.detect import canopy

    ps = info.pixel_size_m
    r_min, r_max = settings.diameter_min_m / 2 / ps, settings.diameter_max_m / 2 / ps
    datas = [w.data[:, w.core[0], w.core[1]] for w in windows]
    valids = [w.valid[w.core] for w in windows]
    evidence = canopy.canopy_evidence(datas, valids, roles, r_min, r_max)
    if seen is not None:
        # NaN without colour bands: nothing measured, nothing recorded
        seen.update({f"canopy_{k}": v for k, v in evidence.items() if math.isfinite(v)})
    if not canopy.is_closed_canopy(evidence):
        return None
    layers = [canopy.canopy_layer(w.data, roles) for w in windows]
    tints = [canopy.canopy_tint(w.data, roles) for w in windows]
    split = canopy.canopy_split(
        [lay[w.core] for lay, w in zip(layers, windows, strict=True)],
        valids,
        r_min,
        r_max,
        tints=[t[w.core] for t, w in zip(tints, windows, strict=True)],
    )
    params = BlobPlan(
        bands=abands,
        pixel_size_m=ps,
        index="canopy",
        scales=scales,
        fill_value=0.0,
        roles=roles,
        canopy=split,
    )
    notes.append(
        f"closed canopy ({100 * evidence['green_share']:.0f}% of the sampled pixels green, "
        f"brightness and greenness correlated {evidence['bright_green_corr']:+.2f}): crowns "
        "split along the dark valleys between them (watershed of smoothed brightness)"
    )
    notes.append(
        Note(
            "closed-canopy counts are unreliable (F1 about 0.92 on the scene suite; some "
            "big crowns counted twice or their points off centre, some small shaded ones "
            "missed): calibrate a detector on mapped crowns (ecoscan "
            "calibrate) and check with ecoscan validate",
            "closed-canopy-unreliable",
            WARNING,
        )
    )
    th = _canopy_record(abands, roles, evidence, split)
    return params, max(overlap, split.overlap_px), scales.align, th, notes


def auto_imagery(info, settings, bands, scales, overlap, dmax_px, notes):
    """Layer and thresholds chosen from the image (robust background statistics)."""
    from ecoscan.detect.autotune import begin_layer_choice, choose_layer, ring_test, strong_test

    lookup = band_lookup(info, settings)
    roles = tuple(r for r in ("red", "green", "blue", "nir") if r in lookup)
    abands = tuple(lookup[r] for r in roles)
    if not roles:
        roles, abands = ("band",), bands
    windows = _sample_windows(info, abands, scales, dmax_px)
    if all(float(np.ptp(w.data[:, w.valid])) == 0.0 for w in windows if w.valid.any()):
        return None, 0, 1, {}, [*notes, no_plants("the image is constant: no plants found")]
    rule: dict[str, float] = {}  # the closed-canopy rule's figures, recorded when it stays off
    # the lent workers start scoring candidate layers while the canopy check runs here
    spare = _spare_layers(roles, settings)
    with begin_layer_choice(windows, roles, scales, spare=spare) as scoring:
        if settings.split_touching:
            closed = _closed_canopy(
                info, settings, windows, roles, abands, scales, overlap, notes, rule
            )
            if closed is not None:
                return closed
        choice = choose_layer(windows, roles, scales, scoring=scoring)
        second = _second_layer(choice, windows, roles, scales, settings, scoring)
    if choice.candidates < MIN_CANDIDATES:  # the best layer shows too few plants
        choice = _shadow_joined_darkness(choice, windows, roles, scales, notes)
        if choice is None:
            return None
    shadow = _shadow_step(choice, windows, roles, info, settings)
    del windows
    params = BlobPlan(
        bands=abands,
        pixel_size_m=info.pixel_size_m,
        index=choice.name,
        scales=scales,
        min_response=DISC_RESPONSE * choice.min_contrast,
        min_response_by_scale=choice.min_response,
        min_value=choice.min_value,
        fill_value=choice.background,
        roles=roles,
        terms=choice.terms,
        split_ratio=SPLIT_RATIO if settings.split_touching else 0.0,
        ring_mads=ring_test(choice),
        shadow_dir=None if shadow is None else shadow["shadow_dir"],
        shadow_radius_max=settings.diameter_max_m / 2 / info.pixel_size_m,
        strong=strong_test(choice),
        second=second,
        **_pale_rules(choice, roles, settings),
        band_blur_px=choice.band_blur_px,
        recentre=choice.band_blur_px > 0,
        ring_open=_ring_open(choice),
    )
    _describe_choice(choice, notes)
    th = {**_auto_thresholds(choice, abands, roles, params.split_ratio > 0), **rule}
    th.update(_second_meta(second))
    th["lobed_crown_share"] = params.lobe_share
    th["lobed_crown_from"] = (
        "on smooth ground with the Excess Green layer alone: a blob holding two or more "
        "strong smaller blobs is kept as one lobed crown (not split as touching crowns) when "
        "its smoothed centre value stands at least this share as high above the background "
        "as its children's on average; none (null) elsewhere"
    )
    if shadow is not None:  # crown-end walks: every blob that lands in a core is exact
        from ecoscan.detect.shadows import reach_px as shadow_reach

        overlap = max(overlap, scales.support_px + shadow_reach(params.shadow_radius_max))
        th.update(_shadow_meta(shadow))
        notes.append(
            f"points placed at the sun-side ends of the crown-plus-shadow blobs (shadows "
            f"fall towards bearing {shadow['bearing_deg']:.0f} deg)"
        )
    if params.ring_mads is not None:  # each ring pixel must be exact in every tile's core
        from ecoscan.detect.blobs import ring_reach_px

        overlap = max(overlap, ring_reach_px(scales))
    if params.recentre:  # every point that lands in a core is recentred as in the whole
        from ecoscan.detect.chromaticity import recentre_reach_px

        overlap = max(overlap, scales.support_px + recentre_reach_px(dmax_px / 2.0))
    if params.band_blur_px > 0:  # the bands' smoothing reaches beyond the filters
        overlap += math.ceil(4.0 * params.band_blur_px) + 1
    return params, overlap, scales.align, th, notes


def _ring_open(choice) -> bool:
    """The ring test on its open sectors, shoulders dropped
    (:func:`ecoscan.detect.autotune.open_ring`; docs/detection-history.md, "Conifer
    pasture, eighth round"). Imported lazily, as elsewhere in this module; a function of
    its own so that its two callers stay within the length limit."""
    from ecoscan.detect.autotune import open_ring

    return open_ring(choice)


def _second_layer(choice, windows, roles, scales, settings, scoring=None):
    """:func:`ecoscan.detect.pale_crowns.second_layer`, or None (also with ``--no-split``,
    which keeps the plain one-layer blobs). Called on the choice before any darkness
    fallback (:func:`_shadow_joined_darkness`): that choice has too few candidates, the
    fallback is not Excess Green, and neither gives a second layer. ``scoring``: the
    layer choice's scoring, with the second layer as a spare layer."""
    from ecoscan.detect.pale_crowns import second_layer

    if not settings.split_touching or choice.candidates < MIN_CANDIDATES:
        return None
    return second_layer(choice, windows, roles, scales, scoring)


def _spare_layers(roles, settings) -> list:
    """The second evidence layer, scored beside the layer choice where it may be used."""
    from ecoscan.detect.pale_crowns import spare_layers

    return spare_layers(roles) if settings.split_touching else []


def _lobe_share(choice, roles, settings) -> float | None:
    """:data:`ecoscan.detect.blobs.LOBE_SHARE` where merged pairs may be lobed crowns."""
    from ecoscan.detect.blobs import LOBE_SHARE
    from ecoscan.detect.pale_crowns import plain_excess_green

    if not settings.split_touching or not plain_excess_green(choice, roles):
        return None
    return LOBE_SHARE


def _pale_rules(choice, roles, settings) -> dict:
    """The plan's lobed-crown share (:func:`_lobe_share`) and clipped layer
    (:func:`ecoscan.detect.clipped_crowns.pale_band`, where touching crowns are split)."""
    from ecoscan.detect.clipped_crowns import pale_band

    band = pale_band(choice, roles) if settings.split_touching else None
    return {"lobe_share": _lobe_share(choice, roles, settings), "pale_band": band}


def _second_meta(second) -> dict:
    """Detection metadata of the second evidence layer (null figures when it is off)."""
    from ecoscan.detect.pale_crowns import CLEAR_RADII, LAYER, MAX_BRIGHTNESS

    return {
        "second_layer": None if second is None else LAYER,
        "second_layer_thresholds": None
        if second is None
        else {
            "min_response_by_scale": list(second.min_response),
            "min_value": second.min_value,
            "background": second.background,
            "max_brightness": second.max_brightness,
        },
        "second_layer_from": (
            "on smooth ground with the Excess Green layer alone: blobs of the green-red index "
            "(GRVI), thresholds from its own background statistics, added as crowns when "
            f"no Excess Green crown lies within {CLEAR_RADII:g} of its radii (its cast "
            f"shadow) and the smoothed brightness at the centre is at most "
            f"{MAX_BRIGHTNESS:g} x the median sampled brightness; none (null) elsewhere"
        ),
    }


def _shadow_step(choice, windows, roles, info, settings):
    """:func:`ecoscan.detect.shadows.shadow_step` for this raster's crown sizes."""
    from ecoscan.detect.shadows import shadow_step

    ps = info.pixel_size_m
    r_min, r_max = settings.diameter_min_m / 2 / ps, settings.diameter_max_m / 2 / ps
    return shadow_step(choice, windows, roles, r_min, r_max)


def _shadow_joined_darkness(best, windows, roles, scales, notes):
    """The darkness layer when its blobs are joined to their shadows, else None.

    Called when the best-separated layer keeps too few candidates (which would fall back
    to Otsu's split): dark crowns on pasture with long shadows show on darkness as many
    strong blobs stretched along the sun's axis, which the crown-end step
    (:mod:`ecoscan.detect.shadows`) can place.
    """
    from ecoscan.detect.autotune import choose_layer

    if not {"red", "green", "blue"} <= set(roles):
        return None
    dark = choose_layer(windows, roles, scales, options=[("darkness",)], chroma=False)
    if dark.candidates < MIN_CANDIDATES or not dark.aligned:
        return None
    notes.append(
        f"the best-separated layer ({LAYER_LABELS.get(best.name, best.name)}) kept only "
        f"{best.candidates} candidates; darkness kept {dark.candidates}, stretched along one "
        "axis (crowns joined to their shadows), and is used with the crown-end step"
    )
    return replace(dark, scores={**best.scores, **dark.scores})


def _shadow_meta(shadow: dict) -> dict:
    """Detection metadata of the crown-end step."""
    from ecoscan.detect.shadows import EDGE_SHARE, REACH_RADII

    return {
        "shadow_bearing_deg": shadow["bearing_deg"],
        "shadow_asymmetry": shadow["asymmetry"],
        "shadow_step": (
            "blobs joined to their shadows: each point moved towards the sun to one blob "
            f"radius inside the first point (within {REACH_RADII:g} largest radii) where "
            f"the layer falls below {EDGE_SHARE:g} of the way from the background to the "
            "blob's own level; the shadows' side of the blob axis from the antisymmetric "
            "cross-correlation of texture and the layer on sample windows"
        ),
    }


def _takeover_note(choice) -> str:
    """Why the log-chromaticity layer was used, in one line (its valley thresholds)."""
    from ecoscan.detect.autotune import SHADOW_FREE, SHADOW_FREE_MARGIN

    label = LAYER_LABELS.get(choice.name, choice.name)
    classic = max(
        (v for k, v in choice.scores.items() if k not in SHADOW_FREE and "-valley" not in k),
        default=0.0,
    )
    if choice.scores.get(choice.name, 0.0) >= SHADOW_FREE_MARGIN * classic > 0.0:
        why = f"it separated at least {SHADOW_FREE_MARGIN:g}x better than every other layer"
    else:
        why = (
            "the better-scored layers were unusable here (too few candidates, or blobs "
            "joined to their cast shadows), and it kept enough candidates"
        )
    return (
        f"{label} used because {why}; its thresholds sit in the valley between ground "
        "bumps and plants"
    )


def _describe_choice(choice, notes: list) -> None:
    """Notes on the layer and thresholds chosen from the image."""
    from ecoscan.detect.autotune import ring_test

    tried = ", ".join(f"{k} {v:.2f}" for k, v in choice.scores.items())
    notes.append(
        f"detection layer: {LAYER_LABELS.get(choice.name, choice.name)}, chosen from the image "
        f"(separation score {tried})"
    )
    if f"{choice.name}-valley" in choice.scores:
        notes.append(_takeover_note(choice))
    notes.append(
        f"thresholds from the background (median {choice.background:.4g}, robust SD "
        f"{choice.spread:.4g}): crown contrast at least {choice.min_contrast:.4g}, centre "
        f"value at least {choice.min_value:.4g}"
    )
    if choice.threshold_raise > 1.0:
        notes.append(
            f"response threshold raised {choice.threshold_raise:.2f}x above the background "
            "noise level: many weak candidates (rough ground, compression blocks or noise) "
            "sat just above it; each plant must also stand out from its own ring of ground"
        )
    elif ring_test(choice) is not None:  # rough ground without a gap to raise into (dry11)
        notes.append(
            "weak candidates (rough ground, compression blocks or noise) spread over a wide "
            "range of responses, with no gap to raise the threshold into; each plant must "
            "also stand out from its own ring of ground"
        )
    if choice.crowded_threshold:
        notes.append(
            Note(
                f"weak separation: {100 * choice.near_share:.0f}% of the plant candidates sit "
                "near the threshold; counts may be unreliable: calibrate a detector on mapped "
                "plants (ecoscan calibrate) or set --threshold and check with ecoscan validate",
                "weak-separation",
                WARNING,
            )
        )
    if choice.aligned:
        notes.append(_aligned_note(choice))


def _aligned_note(choice) -> Note:
    """The warning for blobs stretched along one axis (crowns joined to their shadows)."""
    from ecoscan.detect.elongation import ALIGNED_MIN

    e = choice.elongation
    label = LAYER_LABELS.get(choice.name, choice.name)
    return Note(
        f"detections look joined to cast shadows: the {label} blobs are stretched along one "
        f"axis (bearing {e['axis_deg']:.0f} deg, alignment {e['alignment']:.2f} >= "
        f"{ALIGNED_MIN:g} over {e['blobs']} blobs), so crowns and shadows are counted "
        "together or apart and positions sit between them: calibrate a detector on mapped "
        "plants (ecoscan calibrate), or set --index and --threshold and check with "
        "ecoscan validate",
        "shadow-joined",
        WARNING,
    )


def _auto_thresholds(choice, abands, roles, split: bool) -> dict:
    """The detection metadata of a layer chosen from the image."""
    from ecoscan.detect.autotune import (
        GAP_SHARE,
        MAX_RAISE,
        NEAR,
        REFERENCE_SIGMA_PX,
        RESPONSE_MADS,
        STRONG_VALUE_MADS,
        VALUE_MADS,
        ring_test,
        strong_test,
    )
    from ecoscan.detect.blobs import RING
    from ecoscan.detect.elongation import ALIGNED_MIN, ALIGNED_MIN_Z, MAX_BLOBS

    th = {
        "layer": choice.name,
        "layer_bands": list(abands),
        "layer_roles": list(roles),
        "layer_terms": [[n, w] for n, w in choice.terms],
        "layer_chosen_by": "largest separation score on sample windows",
        "layer_scores": choice.scores,
        "background": choice.background,
        "background_spread": choice.spread,
        "min_contrast": choice.min_contrast,
        "min_contrast_from": (
            f"{RESPONSE_MADS:g} (rising below sigma {REFERENCE_SIGMA_PX:g} px) x robust SD "
            "(1.4826 MAD) of the blob response over background pixels, per scale (median "
            "over scales shown as disc contrast)"
        ),
        "min_response_by_scale": list(choice.min_response),
        "threshold_raise": choice.threshold_raise,
        "threshold_raise_from": (
            f"lowest factor (1 to {MAX_RAISE:g}) on the background-based response threshold "
            f"at which at most {GAP_SHARE:g} of the kept candidates sit within a factor "
            f"{NEAR:g} of it (a gap in the candidates' responses); the factor with the "
            "smallest such share when none reaches it; chosen once on the sample windows"
        ),
        "vegetation_threshold": choice.min_value,
        "vegetation_threshold_from": f"background median + {VALUE_MADS:g} x robust SD",
        "ring_mads": ring_test(choice),
        "ring_mads_from": (
            "on rough ground (threshold raised, or no gap to raise it into): the layer "
            "smoothed at the blob's scale must "
            f"exceed the median of the same over a ring {RING[0]:g}-{RING[1]:g} blob radii "
            "out by this many robust SDs (1.4826 MAD) of the ring; none (null) on smooth "
            "ground"
        ),
        "strong_blob": None if strong_test(choice) is None else list(strong_test(choice)),
        "strong_blob_from": (
            "on smooth ground and a layer with Excess Green: a blob below the "
            "vegetation threshold is kept when its smoothed centre value reaches the first "
            f"figure (background median + {STRONG_VALUE_MADS:g} x robust SD) and its response "
            "the second figure times its scale's threshold; none (null) elsewhere"
        ),
        "near_threshold_share": choice.near_share,
        "blob_alignment": choice.elongation.get("alignment", 0.0),
        "blob_alignment_z": choice.elongation.get("z", 0.0),
        "blob_alignment_axis_deg": choice.elongation.get("axis_deg", 0.0),
        "blob_alignment_from": (
            f"length of the mean elongation vector (second moments of the excess over the "
            f"background) of the kept candidates on sample windows (up to {MAX_BLOBS}); "
            f"flagged at >= {ALIGNED_MIN:g} with n x coherence^2 >= {ALIGNED_MIN_Z:g}"
        ),
        "shadow_joined": choice.aligned,
        "weak_separation": choice.weak,
        "split_touching": split,
    }
    if f"{choice.name}-valley" in choice.scores:  # log-chromaticity: valley thresholds
        from ecoscan.detect.chromaticity import valley_rule

        th.update(valley_rule())
    if _ring_open(choice) and th.get("ring_mads") is not None:  # conifer12
        from ecoscan.detect.chromaticity import open_ring_rule

        th.update(open_ring_rule())
    if choice.band_blur_px > 0:  # the log-chromaticities of locally averaged bands
        from ecoscan.detect.chromaticity import smoothing_rule

        th.update(smoothing_rule(choice.band_blur_px))
    return th
