"""One self-contained HTML page per scored run.

The page holds everything inline: CSS, SVG figures, crops as PNG data inside
SVG, a few lines of JavaScript that only make tables sortable.  It makes no
network request, names no path of the machine it was made on (only file and
directory names), and reads completely with JavaScript off: the show/hide
switches for truth and predictions on the crops are CSS (``:has``), the
subsets are ``<details>``.

Order of the page, as a person asks: what was run; the headline numbers and
the error breakdown; curves per fact (and across the sweep); failures one can
see; per-category and confusion tables.
"""

from __future__ import annotations

import html
import json
from collections.abc import Mapping
from pathlib import Path

from synthgen._io import write_atomic
from synthgen.evaluate import STAT_NAMES, SweepPoint
from synthgen.page.crops import KIND_COLOURS, TRUTH_COLOUR, crop_svg, worst_failures
from synthgen.page.errors import ERROR_KINDS
from synthgen.page.load import Run, Subset
from synthgen.report import charts

__all__ = ["CAUTION", "STAT_TEXT", "KIND_TEXT", "render_page", "PALETTE"]

#: The caution the README carries, word for word.
CAUTION = (
    "Results on synthetic shapes are a controlled probe of a detector or of detection code. They are never "
    "evidence that a detector is safe for a safety-critical use (driving, medicine, industrial safety and the "
    "like): that needs representative real data, the applicable standards and licensed review."
)

#: What each of the twelve statistics is.
STAT_TEXT = {
    "AP": "AP, IoU .50:.95, all sizes",
    "AP50": "AP, IoU .50",
    "AP75": "AP, IoU .75",
    "AP_small": "AP, small (area < 32²)",
    "AP_medium": "AP, medium (32² to 96²)",
    "AP_large": "AP, large (area > 96²)",
    "AR1": "AR, 1 detection per image",
    "AR10": "AR, 10 detections",
    "AR100": "AR, 100 detections",
    "AR_small": "AR, small",
    "AR_medium": "AR, medium",
    "AR_large": "AR, large",
}

#: What each error kind means, in a sentence.
KIND_TEXT = {
    "true_positive": "right class, IoU ≥ 0.5 with an object not yet found",
    "duplicate": "right class, IoU ≥ 0.5 with an object already found",
    "localization": "right class, IoU between 0.1 and 0.5",
    "wrong_class": "IoU ≥ 0.5 with an object of another class",
    "background": "near no object (IoU < 0.1 with its class, < 0.5 with any)",
    "missed": "objects (not predictions) no prediction found or came near",
}

#: Page colours (CSS custom properties); every text/background pair meets WCAG AA (tested).
PALETTE = {
    "--ink": "#1b1d21",
    "--muted": "#4d535c",
    "--paper": "#ffffff",
    "--panel": "#f3f5f8",
    "--rule": "#c9ced6",
    "--accent": "#1f4e99",
    "--warn-ink": "#5c3b00",
    "--warn-bg": "#fff4d6",
    "--bar": "#7f9cc9",
}

_CSS = """
:root{%(vars)s}
*{box-sizing:border-box}
body{margin:0;font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;color:var(--ink);
 background:var(--paper)}
main{max-width:1180px;margin:0 auto;padding:24px 28px 48px}
h1{font-size:26px;margin:0 0 4px}h2{font-size:20px;margin:36px 0 10px;padding-top:10px;border-top:2px solid var(--rule)}
h3{font-size:16px;margin:22px 0 8px}
.sub{color:var(--muted);margin:0 0 14px}
.caution{background:var(--warn-bg);color:var(--warn-ink);border-left:5px solid #b07800;padding:10px 14px;margin:14px 0}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:4px 18px;margin:0}
dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}
.cards{display:flex;flex-wrap:wrap;gap:12px;margin:12px 0}
.card{background:var(--panel);border:1px solid var(--rule);border-radius:6px;padding:8px 14px;min-width:120px}
.card .v{font-size:26px;font-weight:650;font-variant-numeric:tabular-nums}.card .k{color:var(--muted);font-size:13px}
table{border-collapse:collapse;margin:8px 0 16px;font-variant-numeric:tabular-nums}
th,td{padding:4px 10px;border-bottom:1px solid var(--rule);text-align:right}
th{background:var(--panel);font-weight:600}
th:first-child,td:first-child{text-align:left}
td.text{text-align:left;color:var(--muted)}th.text{text-align:left}
td:first-child{white-space:nowrap}
th button{font:inherit;color:inherit;background:none;border:0;padding:0;cursor:pointer}
.bar{display:inline-block;height:10px;background:var(--bar);vertical-align:middle;margin-right:6px}
.grid{display:grid;grid-template-columns:repeat(auto-fill,minmax(360px,1fr));gap:14px}
figure{margin:0}figcaption{font-size:13px;color:var(--muted)}
caption{text-align:left;caption-side:top;padding:0 0 4px}
svg.chart{width:100%%;height:auto;display:block}
.crops{display:grid;grid-template-columns:repeat(auto-fill,minmax(200px,1fr));gap:14px}
svg.crop{width:100%%;height:auto;aspect-ratio:1;display:block;background:#111;image-rendering:pixelated}
svg.crop image{image-rendering:pixelated}
.legend{display:flex;flex-wrap:wrap;gap:6px 18px;align-items:center;margin:6px 0 10px;font-size:14px}
.legend svg{vertical-align:middle;background:#3a3d42;border-radius:3px}
.switch{margin-right:16px}
body:has(#hide-truth:checked) svg.crop g.truth,body:has(#hide-pred:checked) svg.crop g.pred{display:none}
details{margin:10px 0}summary{cursor:pointer;font-weight:600;font-size:17px}
pre{background:var(--panel);padding:8px;overflow:auto;font-size:12px}
footer{color:var(--muted);font-size:13px;margin-top:40px}
"""

_JS = """
document.querySelectorAll('table.sortable th').forEach(function(th){
 var col=th.cellIndex;
 var b=document.createElement('button');b.textContent=th.textContent;b.title='sort by this column';
 th.textContent='';th.appendChild(b);
 b.addEventListener('click',function(){
  var body=th.closest('table').tBodies[0],rows=Array.from(body.rows),up=th.dataset.dir!=='up';
  th.dataset.dir=up?'up':'down';
  rows.sort(function(r,s){var a=r.cells[col],c=s.cells[col];
   var x=a.dataset.value!==undefined?parseFloat(a.dataset.value):a.textContent,
       y=c.dataset.value!==undefined?parseFloat(c.dataset.value):c.textContent;
   if(typeof x==='number'&&typeof y==='number'){x=isNaN(x)?-1:x;y=isNaN(y)?-1:y;return up?x-y:y-x}
   return up?String(x).localeCompare(y):String(y).localeCompare(x)});
  rows.forEach(function(r){body.appendChild(r)})})});
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _num(v, digits: int = 3) -> str:
    if v is None or v != v or v < 0:
        return "–"
    return f"{v:.{digits}f}"


def _gain(v) -> str:
    """A change in AP with its sign; a rise of less than 0.0005 either way reads as 0.000."""
    return "0.000" if abs(v) < 5e-4 else f"{v:+.3f}".replace("-", "−")


def _value_cell(v, attrs: str = "") -> str:
    data = "" if v is None or v != v else f' data-value="{float(v)!r}"'
    return f"<td{attrs}{data}>{_num(v)}</td>"


def _flat(d: Mapping, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        if isinstance(v, Mapping):
            out.update(_flat(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = v
    return out


def _what_was_run(run: Run) -> str:
    det, src = run.detector, run.source
    n_img = sum(len(s.dataset.coco.get("images", [])) for s in run.subsets)
    n_obj = sum(s.evaluation.to_dict()["counts"]["ground_truth"] for s in run.subsets)
    n_pred = sum(len(s.predictions) for s in run.subsets)
    rows = [("detector", det.get("name") or "–")]
    if det.get("spec"):
        rows.append(("detector spec", det["spec"]))
    if det.get("settings"):
        rows.append(("settings", ", ".join(f"{k}={v}" for k, v in det["settings"].items())))
    rows += [("data", f"{src.get('path') or '–'} ({src.get('kind') or run.kind})"),
             ("manifest digest", src.get("manifest_digest") or "–"),
             ("counts", f"{len(run.subsets)} subset{'s' if len(run.subsets) != 1 else ''}, {n_img} images, "
                        f"{n_obj} objects, {n_pred} predictions"),
             ("sliced by", ", ".join(run.by) or "–"),
             ("made", f"{run.created} with synthgen {run.synthgen_version}"
                      + (f", probe took {run.seconds:.1f} s" if run.seconds is not None else ""))]
    out = ['<dl class="facts">'] + [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in rows] + ["</dl>"]
    config = src.get("config")
    if isinstance(config, Mapping):
        flat = _flat(config)
        short = {k: v for k, v in flat.items() if len(json.dumps(v)) <= 40}
        keys = [k for k in ("seed", "count", "canvas.width", "canvas.height", "objects.count", "objects.size",
                            "objects.kinds", "background.kind") if k in short]
        summary = ", ".join(f"{k} = {json.dumps(short[k])}" for k in keys)
        first = " (of the first subset; the varied keys differ)" if len(run.subsets) > 1 else ""
        out.append(f'<p class="sub">config{first}: {_e(summary)}</p>')
        out.append(f"<details><summary>full config</summary><pre>{_e(json.dumps(config, indent=1))}</pre></details>")
    return "\n".join(out)


def _headline(sub: Subset) -> str:
    stats = dict(zip(STAT_NAMES, sub.evaluation.stats))
    key = _e(sub.name)
    cards = "".join(f'<div class="card"><div class="v" data-subset="{key}" data-stat="{n}">{_num(stats[n])}</div>'
                    f'<div class="k">{_e(STAT_TEXT[n])}</div></div>' for n in ("AP", "AP50", "AP75", "AR100"))
    rows = "".join(f'<tr><td>{n}</td><td class="text">{_e(STAT_TEXT[n])}</td>'
                   f'{_value_cell(stats[n], f" data-subset={chr(34)}{key}{chr(34)} data-stat={chr(34)}{n}{chr(34)}")}'
                   "</tr>" for n in STAT_NAMES)
    table = ('<table class="stats"><caption class="sub">"–": no object counts</caption><thead><tr><th>stat</th>'
             f'<th class="text">what</th><th>value</th></tr></thead><tbody>{rows}</tbody></table>')
    per_cat = " · ".join(f"{_e(c.name)} {_num(c.ap)}" for c in sorted(sub.evaluation.per_category,
                                                                      key=lambda c: (c.ap < 0, c.ap)))
    weakest = f'<p class="sub">AP by category, weakest first: {per_cat}</p>' if per_cat else ""
    return (f'<div class="cards">{cards}</div>' + weakest + _errors_table(sub)
            + "<h3>All twelve statistics</h3>" + table)


def _errors_table(sub: Subset) -> str:
    b = sub.errors
    rows = []
    biggest = max([max(b.gain(k)[1], 0.0) for k in ERROR_KINDS[1:]] + [1e-9])
    for kind in ERROR_KINDS:
        n = b.counts[kind]
        if kind == "true_positive":
            gain_cells = '<td>–</td><td>–</td><td class="text">(not an error)</td>'
        else:
            g_ap, g_ap50 = b.gain(kind)
            width = 0 if g_ap50 <= 0 else max(2, round(120 * g_ap50 / biggest))
            gain_cells = (f'<td data-gain="{kind}" data-value="{g_ap50!r}">{_gain(g_ap50)}</td>'
                          f'<td data-value="{g_ap!r}">{_gain(g_ap)}</td>'
                          f'<td class="text"><span class="bar" style="width:{width}px"></span>'
                          f"AP50 {_num(b.mended[kind][1])} if mended</td>")
        swatch = _line_sample(KIND_COLOURS.get(kind, TRUTH_COLOUR), dashed=kind != "missed")
        rows.append(f'<tr><td>{swatch} {_e(kind.replace("_", " "))}</td><td data-value="{n}">{n}</td>'
                    f'{gain_cells}<td class="text">{_e(KIND_TEXT[kind])}</td></tr>')
    note = f"; {b.ignored} on ignore regions, counted neither way" if b.ignored else ""
    return ("<h3>What went wrong, and what each kind of error costs</h3>"
            '<table class="sortable errors"><caption class="sub">each kind of error mended alone and the predictions '
            "scored again by synthgen's COCO scorer; the gain is the rise in AP" + _e(note) + "</caption>"
            "<thead><tr><th>kind</th><th>count</th><th>AP50 gain</th><th>AP gain</th><th class=\"text\">mended</th>"
            f"<th class=\"text\">meaning</th></tr></thead><tbody>{''.join(rows)}</tbody></table>")


def _line_sample(colour: str, *, dashed: bool) -> str:
    dash = ' stroke-dasharray="5 3"' if dashed else ""
    # decorative: the words beside each sample say what it stands for
    return (f'<svg width="30" height="12" aria-hidden="true">'
            f'<line x1="2" y1="6" x2="28" y2="6" stroke="#000" stroke-width="4"{dash}/>'
            f'<line x1="2" y1="6" x2="28" y2="6" stroke="{colour}" stroke-width="2"{dash}/></svg>')


def _curves(sub: Subset, prefix: str) -> str:
    if not sub.slices:
        return '<p class="sub">no per-object facts to slice by in this dataset.</p>'
    figs = []
    for i, (fact, bins) in enumerate(sub.slices.items()):
        fig = charts.slice_figure(fact, bins)
        kind = "bars per value" if bins[0].lo is None else "lines over bins"
        alt = (f"AP at IoU .5, AP at IoU .5:.95 and recall at IoU .5 by {fact} ({kind}); "
               + "; ".join(f"{t.replace(chr(10), ' ')}: AP50 {_num(b.ap50)}, recall {_num(b.recall50)}"
                           for t, b in zip(charts.bin_ticks(bins), bins)))
        svg = charts.svg_text(fig, alt, id_prefix=f"{prefix}f{i}")
        figs.append(f"<figure>{svg}<figcaption>by {_e(charts.axis_label(fact))}; n = objects in the bin"
                    "</figcaption></figure>")
    return '<div class="grid">' + "".join(figs) + "</div>"


def _crop_grid(crops, empty: str) -> str:
    if not crops:
        return f'<p class="sub">{_e(empty)}</p>'
    items = "".join(f"<figure>{crop_svg(c)}<figcaption>{_e(c.caption)}</figcaption></figure>" for c in crops)
    return f'<div class="crops">{items}</div>'


def _failures(sub: Subset, count: int) -> str:
    misses, fps = worst_failures(sub, count)
    return ("<h3>Worst misses (largest objects no true positive found)</h3>" + _crop_grid(misses, "no missed objects.")
            + "<h3>Worst false positives (highest scores)</h3>" + _crop_grid(fps, "no false positives."))


def _legend() -> str:
    items = [f"{_line_sample(TRUTH_COLOUR, dashed=False)} truth"]
    items += [f"{_line_sample(KIND_COLOURS[k], dashed=True)} {_e(k.replace('_', ' '))}"
              for k in ("true_positive", "duplicate", "localization", "wrong_class", "background")]
    switches = ('<label class="switch"><input type="checkbox" id="hide-truth"> hide truth</label>'
                '<label class="switch"><input type="checkbox" id="hide-pred"> hide predictions</label>')
    spans = "".join(f"<span>{i}</span>" for i in items)
    return (f'<div class="legend"><span>truth solid, predictions dashed:</span>{spans}'
            f"</div><div class=\"legend\">{switches}<span class=\"sub\">each crop shows at least "
            "10 image pixels across, enlarged with square pixels; outlines lie just outside the boxes</span></div>")


def _tables(sub: Subset) -> str:
    rows = "".join(f"<tr><td>{_e(c.name)}</td><td data-value=\"{c.n_gt}\">{c.n_gt}</td>"
                   f"<td data-value=\"{c.n_pred}\">{c.n_pred}</td>{_value_cell(c.ap)}{_value_cell(c.ap50)}"
                   f"{_value_cell(c.ap75)}{_value_cell(c.ar100)}</tr>" for c in sub.evaluation.per_category)
    cats = ('<table class="sortable percat"><caption class="sub">per category ("–": no objects of it)</caption><thead>'
            "<tr><th>category</th><th>objects</th><th>predictions</th><th>AP</th><th>AP50</th><th>AP75</th>"
            f"<th>AR100</th></tr></thead><tbody>{rows}</tbody></table>")
    conf = sub.evaluation.confusion
    head = "".join(f"<th>{_e(n)}</th>" for n in conf.names)
    body = "".join(f"<tr><td>{_e(r)}</td>" + "".join(f"<td>{v}</td>" for v in row) + "</tr>"
                   for r, row in zip([*conf.names, "none"], conf.counts.tolist()))
    confusion = ('<table class="confusion"><caption class="sub">detections at IoU 0.5: the object hit (rows) by '
                 f"predicted class (columns); row none: hit no object of another class</caption><thead><tr>"
                 f"<th>object \\ predicted</th>{head}</tr></thead><tbody>{body}</tbody></table>")
    return cats + confusion


def _sweep(run: Run) -> str:
    points = [SweepPoint(s.name, s.varied, s.evaluation, s.slices) for s in run.subsets]
    title = f"{run.detector.get('name') or 'predictions'} on {run.source.get('path') or 'the sweep'}"
    fig = charts.sweep_figure(points, title=title, width_px=560, height_px=340)
    alt = f"AP50, AP and recall at IoU .5 across the sweep: {title}; " + "; ".join(
        f"{p.label or p.subset}: AP50 {_num(p.evaluation.stats[1])}" for p in points)
    rows = "".join(
        f"<tr><td>{_e(p.label or p.subset)}</td><td data-value=\"{s.evaluation.to_dict()['counts']['ground_truth']}\">"
        f"{s.evaluation.to_dict()['counts']['ground_truth']}</td><td data-value=\"{len(s.predictions)}\">"
        f"{len(s.predictions)}</td>"
        + "".join(_value_cell(s.evaluation.stats[STAT_NAMES.index(n)]) for n in ("AP", "AP50", "AP75", "AR100"))
        + "</tr>" for p, s in zip(points, run.subsets))
    table = ('<table class="sortable"><thead><tr><th>subset</th><th>objects</th><th>predictions</th><th>AP</th>'
             f"<th>AP50</th><th>AP75</th><th>AR100</th></tr></thead><tbody>{rows}</tbody></table>")
    return (f'<h2 id="sweep">Across the sweep</h2><figure style="max-width:620px">'
            f"{charts.svg_text(fig, alt, id_prefix='sw')}<figcaption>n = objects in each subset</figcaption></figure>"
            + table)


def _subset_body(sub: Subset, idx: int, crops: int) -> str:
    return ("<h2>The headline</h2>" + _headline(sub)
            + "<h2>Curves by fact</h2><p class=\"sub\">every chart on the same 0 to 1 scale; ordered facts as lines "
              "over bins, categorical facts as bars</p>" + _curves(sub, f"s{idx}")
            + "<h2>Failures you can see</h2>" + _legend() + _failures(sub, crops)
            + "<h2>Per category and confusion</h2>" + _tables(sub))


def render_page(run: Run, *, crops: int = 10) -> str:
    """The page's HTML text.

    Parameters
    ----------
    run : Run
        From :func:`synthgen.page.load.load_run`.
    crops : int
        Worst misses and worst false positives shown per subset (each).
    """
    css = _CSS % {"vars": ";".join(f"{k}:{v}" for k, v in PALETTE.items())}
    parts = [
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width,initial-scale=1">',
        f"<title>{_e(run.title)} · synthgen report</title><style>{css}</style></head><body><main>",
        f"<h1>{_e(run.title)}</h1>",
        f'<p class="sub">synthgen report · {_e(run.created)}</p>',
        f'<p class="caution" role="note"><strong>Caution.</strong> {_e(CAUTION)}</p>',
        "<h2>What was run</h2>",
        _what_was_run(run),
    ]
    if len(run.subsets) > 1:
        parts.append(_sweep(run))
        for i, sub in enumerate(run.subsets):
            label = ", ".join(f"{k} = {json.dumps(v)}" for k, v in sub.varied.items()) or sub.name
            parts.append(f"<details{' open' if i == 0 else ''}><summary>subset {_e(label)}</summary>"
                         + _subset_body(sub, i, crops) + "</details>")
    else:
        parts.append(_subset_body(run.subsets[0], 0, crops))
    parts.append("<footer>Made by synthgen from the files named above; every number is computed by its COCO "
                 "scorer. This page works offline and needs no script.</footer></main>")
    parts.append(f"<script>{_JS}</script></body></html>")
    return "\n".join(parts)


def write_page(run: Run, out, *, crops: int = 10) -> int:
    """Write the page to ``out`` atomically; returns its size in bytes."""
    data = render_page(run, crops=crops).encode("utf-8")
    write_atomic(Path(out), data)
    return len(data)
