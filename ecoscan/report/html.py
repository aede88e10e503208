"""The survey report: one self-contained HTML file (figures embedded, no network access)."""

from __future__ import annotations

import base64
import html
import io
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ecoscan import __version__
from ecoscan.analysis.dispersion.detectable import NO_DEPARTURE, VERDICTS
from ecoscan.io.outputs import write_text
from ecoscan.vocabulary import COLUMNS, format_cell, label

__all__ = [
    "CAUTIONS_HTML",
    "ReportSection",
    "build_report",
    "figure_html",
    "methods_html",
    "table_html",
]

#: Text cells longer than this many characters may wrap between words (class ``long``).
LONG_TEXT = 20
#: Tables with more columns than this may, in print, wrap inside a word as a last resort
#: (so that they still fit A4); narrower tables wrap only between words and after a slash.
MANY_COLUMNS = 16

_CSS = """
:root { --ink:#1d2430; --muted:#5b6575; --line:#d9dee6; --accent:#1f4e8c; --paper:#fbfbf8;
        --clustered:#7d6b15; --regular:#1f4e8c; --random:#6b6b6b; }
* { box-sizing: border-box; }
body { margin:0; font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color:var(--ink);
       background:var(--paper); line-height:1.45; font-size:16px; }
header.top { background:#22303f; color:#f4f1e8; padding:1.1rem 2rem .9rem; }
header.top h1 { margin:0 0 .2rem; font-size:1.5rem; font-weight:600; }
header.top p { margin:0; color:#c9cfd8; font-size:.92rem; }
nav.toc { padding:.5rem 2rem; border-bottom:1px solid var(--line); background:#fff;
          font-size:.9rem; position:sticky; top:0; z-index:2; }
nav.toc a { margin-right:1.1rem; color:var(--accent); text-decoration:none; }
main { padding:0 2rem 3rem; max-width:1240px; }
h2 { margin:1.8rem 0 .6rem; font-size:1.25rem; border-bottom:2px solid var(--ink);
     padding-bottom:.2rem; }
h3 { margin:1.2rem 0 .4rem; font-size:1.08rem; }
h4 { margin:0 0 .4rem; font-size:1rem; }
p.lede { max-width:60rem; } .muted { color:var(--muted); font-size:.9rem; }
#summary p { max-width:60rem; }
table.data { border-collapse:collapse; font-size:.88rem; background:#fff; margin:.4rem 0 1rem; }
table.data th, table.data td { border-bottom:1px solid var(--line); padding:.26rem .5rem;
     text-align:right; white-space:nowrap; }
table.data th { background:#eef1f5; font-weight:600; white-space:normal; vertical-align:bottom;
     min-width:3.2rem; }
table.data td.text, table.data th.text { text-align:left; }
table.data td.long { white-space:normal; min-width:9.5rem; } .nw { white-space:nowrap; }
table.data td.warn { text-align:left; white-space:normal; min-width:7rem; color:#7a4b00; }
table.data a { color:var(--accent); }
table.sortable th { cursor:pointer; }
table.sortable th[aria-sort="ascending"]::after { content:" ▲"; font-size:.7em; }
table.sortable th[aria-sort="descending"]::after { content:" ▼"; font-size:.7em; }
table.kv th { background:none; font-weight:normal; text-align:left; }
.scroll { overflow-x:auto; max-width:100%; }
.tag { display:inline-block; padding:.05rem .45rem; border-radius:.7rem; color:#fff;
       font-size:.82rem; }
.tag.clustered { background:var(--clustered); } .tag.regular { background:var(--regular); }
.tag.random { background:var(--random); } .tag.none { background:#888; }
article.plot { background:#fff; border:1px solid var(--line); border-radius:.4rem;
               padding:.8rem 1rem; margin:0 0 1rem; }
.plotmain { display:flex; flex-wrap:wrap; gap:1rem; align-items:flex-start; }
.plottext { flex:1 1 20rem; max-width:40rem; }
ul.warnings { color:#7a4b00; padding-left:1.2rem; margin:.3rem 0; }
details { margin-top:.6rem; } summary { cursor:pointer; color:var(--accent); }
.detail { display:flex; flex-wrap:wrap; gap:1rem; align-items:flex-start; margin-top:.5rem; }
figure { margin:.2rem 0; } figure img { max-width:100%; height:auto; display:block; }
figcaption { font-size:.85rem; color:var(--muted); max-width:36rem; }
.caution { background:#fff7e6; border-left:4px solid #c98a00; padding:.7rem 1rem; }
.method { background:#fff; border:1px solid var(--line); padding:.6rem 1rem; margin:.5rem 0; }
code, .formula { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size:.88rem; }
footer { color:var(--muted); font-size:.85rem; padding:1rem 2rem;
         border-top:1px solid var(--line); }
@page { size: A4; margin: 12mm; }
@media print {
  body { background:#fff; font-size:10pt; }
  header.top { background:none; color:#000; padding:0 0 .3rem; }
  header.top p { color:#333; }
  nav.toc, summary::marker { display:none; }
  main { padding:0; max-width:none; }
  section.top + section.top { break-before:page; }
  h2, h3, h4 { break-after:avoid; }
  .scroll { overflow:visible; }
  table.data { font-size:7.5pt; width:100%; }
  table.data th, table.data td { padding:.1rem .22rem; }
  table.data td { white-space:normal; }
  table.data th, table.data td.warn, table.data td.long { min-width:0; }
  table.data.many th, table.data.many td { overflow-wrap:anywhere; }
  tr, figure, .method { break-inside:avoid; }
  article.plot { break-inside:avoid-page; border:none; padding:0; }
  .tag { color:#000 !important; background:none !important; border:1px solid #000; }
  a { color:inherit; text-decoration:none; }
}
"""

_SORT_JS = """
document.querySelectorAll('table.sortable').forEach(function (t) {
  t.querySelectorAll('th').forEach(function (th, i) {
    th.addEventListener('click', function () {
      var asc = th.getAttribute('aria-sort') !== 'ascending';
      t.querySelectorAll('th').forEach(function (h) { h.removeAttribute('aria-sort'); });
      th.setAttribute('aria-sort', asc ? 'ascending' : 'descending');
      var body = t.tBodies[0], rows = Array.prototype.slice.call(body.rows);
      var key = function (r) {
        var c = r.cells[i], v = c.getAttribute('data-v');
        return v === null ? c.textContent.trim().toLowerCase() : parseFloat(v);
      };
      rows.sort(function (a, b) {
        var x = key(a), y = key(b);
        var d = (typeof x === 'number' && typeof y === 'number') ? x - y
              : String(x).localeCompare(String(y), undefined, {numeric: true});
        return asc ? d : -d;
      });
      rows.forEach(function (r) { body.appendChild(r); });
    });
  });
});
"""

CAUTIONS_HTML = """
<div class="caution">
<p><strong>Automated counts need checking in the field.</strong> Detection accuracy depends on
image resolution, season, illumination, crown overlap and the detector settings. Before any
management decision (thinning, replanting, herbicide or grazing plans, compliance reporting),
check a sample of plots on the ground and compare with <code>ecoscan validate</code>.</p>
<p><strong>Statistics describe pattern, not cause.</strong> A clustered or regular verdict says
how the plants stand, not why. Results depend on the plot boundary, the scale of analysis
and the quadrat size; plots with fewer than 30 plants give weak tests (common practice).</p>
<p><strong>Local rules come first.</strong> Field work, drone flights and management actions
are governed by local regulations, land-owner permissions and licensed professional
practice; ecoscan's output does not replace them.</p>
</div>
"""


@dataclass
class ReportSection:
    """A titled part of the report; ``body`` is ready HTML."""

    title: str
    body: str
    anchor: str = ""
    children: list[ReportSection] = field(default_factory=list)


def _esc(v: Any) -> str:
    return html.escape(str(v), quote=True)


def figure_html(png: str | os.PathLike, caption: str = "", alt: str = "") -> str:
    """A ``<figure>`` with the PNG or JPEG embedded as a data URI (no external file needed)."""
    from PIL import Image

    path = Path(png)
    mime = "image/jpeg" if path.suffix.lower() in (".jpg", ".jpeg") else "image/png"
    raw = path.read_bytes()
    with Image.open(io.BytesIO(raw)) as im:  # the bytes already read, not the file again
        w, h = im.size
    data = base64.b64encode(raw).decode("ascii")
    cap = f"<figcaption>{_esc(caption)}</figcaption>" if caption else ""
    # shown at its natural size (figures are drawn at 96 dpi, the CSS pixel density), so the
    # type is as large as it was drawn; asynchronous decoding keeps long reports quick to open
    return (
        f'<figure style="max-width:{w}px"><img src="data:{mime};base64,{data}" width="{w}" '
        f'height="{h}" decoding="async" alt="{_esc(alt or caption)}">{cap}'
        "</figure>"
    )


def pattern_tag(pattern: Any) -> str:
    """A small coloured label for a verdict (text is always shown, colour is secondary)."""
    p = str(pattern or "")
    cls = {"clustered": "clustered", "regular": "regular", "random": "random"}.get(p, "none")
    if p == NO_DEPARTURE:
        cls = "random"
    return f'<span class="tag {cls}">{_esc(p or "no test")}</span>'


def _heading(text: str) -> str:
    """A column heading that may wrap after a slash ("plants/ha") but never inside a word."""
    return _esc(text).replace("/", "/<wbr>")


def _text_cell(text: str) -> str:
    """A text cell; a long one (a label or a sentence) may wrap between words so that a
    wide table fits the page. No cell wraps inside a word with a hyphen (a date, a range),
    also in print, where short cells may wrap too."""
    words = (f'<span class="nw">{_esc(w)}</span>' if "-" in w else _esc(w) for w in text.split(" "))
    cls = "text long" if len(text) > LONG_TEXT else "text"
    return f'<td class="{cls}">{" ".join(words)}</td>'


def table_html(
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[str],
    *,
    sortable: bool = False,
    css_class: str = "",
    link: str = "",
) -> str:
    """A data table with headings, units and number formats from :mod:`ecoscan.vocabulary`.

    Numbers are right-aligned, verdicts tagged, warnings wrapped; each heading carries the
    column's description as a tooltip.

    Parameters
    ----------
    rows : sequence of mappings
        Records to show.
    columns : sequence of str
        Column keys, in order.
    sortable : bool
        Let the reader sort by clicking a heading (a few lines of inline script).
    css_class : str
        Extra class for the ``<table>``.
    link : str
        A column whose cells link to each row's ``_href`` (e.g. the plot's section).

    Returns
    -------
    str

    Examples
    --------
    >>> html = table_html([{"density_per_ha": 952.4}], ["density_per_ha"])
    >>> 'title="Plants per hectare."' in html, "<td>952</td>" in html
    (True, True)
    """
    many = "many" if len(columns) > MANY_COLUMNS else ""
    cls = " ".join(x for x in ("data", "sortable" if sortable else "", many, css_class) if x)
    out = [f'<div class="scroll"><table class="{cls}"><thead><tr>']
    numeric = {}
    for c in columns:
        col = COLUMNS.get(c)
        numeric[c] = (
            col.fmt not in ("text", "bool")
            if col
            else all(isinstance(r.get(c), (int, float)) or r.get(c) in (None, "") for r in rows)
        )
        tip = f' title="{_esc(col.description)}"' if col else ""
        kind = "num" if numeric[c] else "text"
        out.append(f'<th class="{kind}" scope="col"{tip}>{_heading(label(c))}</th>')
    out.append("</tr></thead><tbody>")
    for r in rows:
        out.append("<tr>")
        for c in columns:
            v = r.get(c)
            if c == "verdict" and isinstance(v, str) and v in (*VERDICTS, "random", ""):
                out.append(f'<td class="text">{pattern_tag(v)}</td>')
            elif c == link and r.get("_href"):
                text = _esc(format_cell(c, v) or "–")
                out.append(f'<td class="text"><a href="{_esc(r["_href"])}">{text}</a></td>')
            elif c == "warnings":
                out.append(f'<td class="warn">{_esc(format_cell(c, v))}</td>')
            elif numeric[c] and isinstance(v, (int, float)) and not isinstance(v, bool):
                sort = f' data-v="{float(v):.6g}"' if sortable else ""
                out.append(f"<td{sort}>{_esc(format_cell(c, v) or '–')}</td>")
            else:
                out.append(_text_cell(format_cell(c, v) or "–"))
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


_TOPIC_METHODS = {
    "detection": [
        (
            "Plant detection in imagery",
            "The layer is chosen from the image: Excess Green ExG = 2g − r − b on chromatic "
            "coordinates, darkness, their sum, or log-chromaticity (NDVI = (NIR − Red) / "
            "(NIR + Red) when a near-infrared band is named), by how far blob candidates "
            "stand above the background on sample windows. Thresholds come from the "
            "background's median and robust spread (MAD), raised into a gap of the "
            "candidates where many sit near it (Otsu's method only when an index or "
            "threshold is set by hand). Blobs by a difference-of-Gaussians scale pyramid over "
            "the crown diameters given in metres (a disc of radius ρ responds most at "
            "σ = ρ/√2). Each raster's layer and thresholds are listed in the notes.",
            "Woebbecke, D. M. et al. (1995). Trans. ASAE 38: 259–269; Rouse, J. W. et al. "
            "(1974). NASA SP-351; Hampel, F. R. (1974). JASA 69: 383–393; Finlayson, G. D. "
            "et al. (2009). IJCV 85: 35–57; Otsu, N. (1979). IEEE Trans. SMC 9: 62–66; "
            "Lindeberg, T. (1998). IJCV 30: 79–116; Lowe, D. G. (2004). IJCV 60: 91–110.",
        ),
        (
            "Tree tops and crowns on canopy height models; patches on class maps",
            "Local maxima above a minimum height in a window whose diameter is the crown width "
            "predicted from height; crowns and touching patches separated by "
            "marker-controlled watershed.",
            "Popescu, S. C. &amp; Wynne, R. H. (2004). PE&amp;RS 70: 589–604; Meyer, F. &amp; "
            "Beucher, S. (1990). J. Visual Communication and Image Representation 1: 21–46.",
        ),
    ],
    "scales": [
        (
            "Second-order and distance functions",
            "K(r) with Ripley's isotropic edge correction (weight 2πr / length of the circle "
            "inside the plot, computed exactly); L(r) = √(K/π); pair correlation g(r) by "
            "kernel estimate; G and F with Kaplan–Meier correction; J = (1 − G)/(1 − F). Under "
            "complete spatial randomness K = πr², L = r, g = 1, G = F = 1 − exp(−λπr²), J = 1.",
            "Ripley, B. D. (1976). J. Appl. Prob. 13: 255–266; Ripley (1977). JRSS B 39: "
            "172–212; Besag, J. (1977), discussion of Ripley (1977); van Lieshout, M. N. M. "
            "&amp; Baddeley, A. J. (1996). Statistica Neerlandica 50: 344–361.",
        ),
        (
            "Global envelope test",
            "Simulations of random patterns in the same plot; the extreme rank length (or "
            "maximum absolute deviation) test controls the error over all distances at once, "
            "and the distances where the observed curve leaves the envelope give the ranges.",
            "Myllymäki, M. et al. (2017). JRSS B 79: 381–404; Baddeley, A. et al. (2014). "
            "Ecological Monographs 84: 477–489.",
        ),
    ],
    "habitat": [
        (
            "Plant density from habitat covariates",
            "Log-linear intensity λ(u) = exp(β₀ + Σ β<sub>k</sub> z<sub>k</sub>(u)) fitted by "
            "maximum likelihood: the Poisson-process likelihood approximated on a quadrature "
            "of the plants and a grid of dummy points (weights = cell areas shared within "
            "each cell) is a weighted Poisson GLM (statsmodels); Wald 95% intervals; the "
            "effect stated as the density ratio per round step of the covariate. Without "
            "covariates: Gaussian kernel density with Diggle's edge correction, bandwidth by "
            "Scott's rule σ̄ n<sup>−1/6</sup>.",
            "Berman, M. &amp; Turner, T. R. (1992). Applied Statistics 41: 31–38; Baddeley, A. "
            "&amp; Turner, R. (2000). Aust. N. Z. J. Statistics 42: 283–322; Diggle, P. J. "
            "(1985). Applied Statistics 34: 138–147; Scott, D. W. (1992). Multivariate "
            "Density Estimation. Wiley.",
        ),
        (
            "Clustering beyond habitat",
            "Inhomogeneous K: each pair weighted by the edge weight over λ(x<sub>i</sub>) "
            "λ(x<sub>j</sub>), divided by the plot area; L = √(K/π); pair correlation "
            "likewise. Envelopes from the fitted inhomogeneous Poisson process simulated in "
            "the exact plot (thinning), with the model refitted to every simulated pattern.",
            "Baddeley, A. J., Møller, J. &amp; Waagepetersen, R. (2000). Statistica "
            "Neerlandica 54: 329–350; Lewis, P. A. W. &amp; Shedler, G. S. (1979). Naval "
            "Research Logistics Quarterly 26: 403–413.",
        ),
        (
            "Size and spacing",
            "Mark correlation k<sub>mm</sub>(r) = mean of m<sub>i</sub>m<sub>j</sub> over "
            "pairs r apart / μ² (kernel-weighted), 1 when size does not depend on position; "
            "mark variogram γ(r) = half the mean of (m<sub>i</sub> − m<sub>j</sub>)²; "
            "envelopes from random permutations of the marks.",
            "Stoyan, D. (1984). Math. Nachrichten 116: 197–207; Illian, J. et al. (2008). "
            "Statistical Analysis and Modelling of Spatial Point Patterns. Wiley.",
        ),
    ],
    "compare": [
        (
            "Comparing groups",
            "Density: exact test for two Poisson rates, conditional on the total (binomial "
            "with p = A₁/(A₁ + A₂)); R: z test of the difference with Clark–Evans or Donnelly "
            "standard errors, and a permutation test moving whole plots between groups; "
            "nearest-neighbour distances: Mann–Whitney U and two-sample Kolmogorov–Smirnov; "
            "Holm's step-down adjustment for many pairs.",
            "Przyborowski, J. &amp; Wilenski, H. (1940). Biometrika 31: 313–323; Holm, S. "
            "(1979). Scand. J. Statistics 6: 65–70.",
        ),
    ],
    "change": [
        (
            "Change between dates",
            "Overall shift between the mosaics estimated and removed; plants matched "
            "one-to-one within the tolerance by optimal assignment; survival with the Wilson "
            "score interval; change in R tested against random losses and recruits.",
            "Kuhn, H. W. (1955). Naval Research Logistics Quarterly 2: 83–97; Wilson, E. B. "
            "(1927). JASA 22: 209–212.",
        ),
    ],
}


def methods_html(extra: Sequence[str] = (), topics: Sequence[str] = ()) -> str:
    """The methods section: each formula with its published source.

    Parameters
    ----------
    extra : sequence of str
        Further HTML blocks appended at the end.
    topics : sequence of str
        Optional parts to add: ``detection``, ``scales``, ``compare``, ``change``.
    """
    items = [
        (
            "Clark–Evans nearest-neighbour index",
            "ρ = n / A; expected mean distance under complete spatial randomness "
            "r̄<sub>E</sub> = 1 / (2√ρ); R = r̄<sub>A</sub> / r̄<sub>E</sub>; "
            "SE = 0.26136 / √(nρ); z = (r̄<sub>A</sub> − r̄<sub>E</sub>) / SE. "
            "R = 0 when all plants coincide, about 1 at random, 2.1491 for a hexagonal "
            "lattice.",
            "Clark, P. J. &amp; Evans, F. C. (1954). Ecology 35: 445–453.",
        ),
        (
            "Edge correction from area and perimeter",
            "Expected mean distance 0.5√(A/n) + (0.0514 + 0.041/√n)·P/n and variance "
            "0.0703·A/n² + 0.037·P·√(A/n⁵), P the plot perimeter; R<sub>Donnelly</sub> is the "
            "observed mean over this expectation.",
            "Donnelly, K. P. (1978). In Hodder (ed.), Simulation Studies in Archaeology, "
            "Cambridge Univ. Press, 91–95.",
        ),
        (
            "Guard zone",
            "Only plants farther than the guard distance from the plot edge are focal; their "
            "neighbours may be any plant; the density is that of the whole plot. Its p-value "
            "ranks the focal mean among the same random patterns as the verdict, each with "
            "its own number of focal plants.",
            "Border (reduced-sample) method, e.g. Ripley, B. D. (1977). JRSS B 39: 172–212.",
        ),
        (
            "Monte Carlo test in the exact plot shape (the verdict)",
            "The same number of plants is placed at random in the plot polygon many times; "
            "p = (1 + k) / (N + 1) where k simulations are at least as extreme; two-sided "
            "p = min(1, 2·min(p<sub>lower</sub>, p<sub>upper</sub>)). Simulation stops "
            "early once h simulations are as extreme in each tail (p = h / l after l "
            "simulations), which only happens when p is large.",
            "Besag, J. &amp; Diggle, P. J. (1977). Applied Statistics 26: 327–333; Besag, J. "
            "&amp; Clifford, P. (1991). Biometrika 78: 301–304.",
        ),
        (
            "Quadrats",
            "Equal cells fitted to the plot (each whole cell expecting at least 5 plants "
            "where the count allows), clipped to it; expected counts n·a<sub>i</sub>/A; Pearson "
            "X² = Σ (O − E)² / E with (cells − 1) degrees of freedom, two-sided p; "
            "variance-to-mean ratio s²/x̄; expected counts below 5 weaken the χ² "
            "approximation (common practice).",
            "Pearson's chi-square; Cochran's rule (common practice).",
        ),
        (
            "Morisita's index and its standardised form",
            "I<sub>δ</sub> = q Σ n<sub>i</sub>(n<sub>i</sub> − 1) / (N(N − 1)); standardised "
            "I<sub>p</sub> in [−1, 1] with ±0.5 at the 95% limits, taken from the multinomial "
            "simulation of the plot's own cells (exact for clipped, unequal cells).",
            "Morisita, M. (1959). Mem. Fac. Sci. Kyushu Univ. E 2: 215–235; Smith-Gill, S. J. "
            "(1975). J. Morphology 146: 35–54, as given in Krebs, C. J. (1999) Ecological "
            "Methodology, 2nd ed.",
        ),
    ]
    for t in topics:
        items += _TOPIC_METHODS.get(t, [])
    out = []
    for title, formula, source in items:
        out.append(
            f'<div class="method"><strong>{title}.</strong> <span class="formula">{formula}'
            f"</span><br><em>Source:</em> {source}</div>"
        )
    out.extend(extra)
    return "\n".join(out)


def _section_html(sec: ReportSection, level: int = 2) -> str:
    anchor = f' id="{_esc(sec.anchor)}"' if sec.anchor else ""
    parts = [f"<h{level}>{_esc(sec.title)}</h{level}>", sec.body]
    for child in sec.children:
        parts.append(_section_html(child, min(level + 1, 4)))
    cls = "top" if level == 2 else "sub"
    return f'<section class="{cls}"{anchor}>' + "\n".join(parts) + "</section>"


def build_report(
    path: str | os.PathLike,
    *,
    title: str,
    subtitle: str,
    sections: Sequence[ReportSection],
    provenance: Mapping[str, Any] | None = None,
) -> Path:
    """Write the self-contained HTML report atomically.

    Parameters
    ----------
    path : path-like
        The ``report.html`` to write.
    title, subtitle : str
        Heading lines.
    sections : sequence of ReportSection
        Top-level sections, in order; each appears in the navigation bar.
    provenance : mapping, optional
        Shown in the footer (version, run time, inputs).
    """
    nav = " ".join(f'<a href="#{_esc(s.anchor)}">{_esc(s.title)}</a>' for s in sections if s.anchor)
    body = "\n".join(_section_html(s) for s in sections)
    prov = ""
    if provenance:
        prov = " · ".join(f"{_esc(k)}: {_esc(v)}" for k, v in provenance.items())
    doc = f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{_esc(title)}</title>
<style>{_CSS}</style>
</head>
<body>
<header class="top"><h1>{_esc(title)}</h1><p>{_esc(subtitle)}</p></header>
<nav class="toc">{nav}</nav>
<main>
{body}
</main>
<footer>Made by ecoscan {__version__}. {prov}</footer>
<script>{_SORT_JS}</script>
</body>
</html>
"""
    return write_text(path, doc)
