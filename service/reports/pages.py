# ruff: noqa: E501  (the HTML, CSS and script templates below keep their natural line lengths)
"""HTML pages: one per check (facts, modes, diagnostics and its plots) and one per batch (a table
of variants sortable by verdict, frequency and node, each row linking to its check's page).

Pages are self-contained: CSS and the small sorting script are inline, plots are embedded as
``data:`` URIs, so a page can be mailed, archived by CI or served as it is. Each page carries its
Content-Security-Policy (:data:`PAGE_POLICY`, also sent as a header by the API): nothing is
fetched, images only from ``data:``, the one style sheet and the one script only by their
SHA-256 (CSP Level 3, "hash-source"), inline ``style`` attributes allowed (the page's colours
and bar widths, escaped by Jinja).
"""

from __future__ import annotations

import base64
import hashlib
from collections.abc import Callable, Mapping
from typing import Any

from jinja2 import DictLoader, Environment

from service.reports import check_rows, style
from service.reports.outcomes import state_of
from service.reports.trend import least_damped
from service.reports.units import format_hz, format_number

PLOT_CAPTIONS = {
    "ndf": "NDF contour. Each clockwise turn around the origin (red cross) is one natural "
           "frequency in the right half-plane. Pale underlay: stretches between samples drawn "
           "from the validated model. The right panel is zoomed to the closest approach.",
    "admittance": "Driving-point admittance. A node can start to oscillate where Im Y rises "
                  "through zero while Re Y ≤ 0 (diamonds in the node's colour); dashed red "
                  "lines are unstable modes. The legend gives each node's share in the mode.",
    "factors": "K and μ of the external two-port. Shaded bands: some passive termination could "
               "make the two-port oscillate. Triangles at the edge mark values beyond the scale. "
               "Loops inside the circuit are invisible here.",
    "circles": "Stability circles at a few telling frequencies, coloured by frequency; ticks "
               "point into the side whose terminations would make the other port's reflection "
               "exceed 1, and the legend says how much of the unit disk that is.",
}
DEVICE_CAPTION = ("Return difference F of {name}: NDF with {name} switched on over NDF "
                  "before it. Each clockwise turn around the origin is a right-half-plane natural "
                  "frequency that switching on {name} adds.")

#: order of severity, used for the default sort and the sort key of the verdict column
SEVERITY = {"unstable": 0, "indeterminate": 1, "failed": 2, "cancelled": 3, "running": 4,
            "queued": 5, "stable": 6}

_CSS = """
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
 font:15px/1.45 "DejaVu Sans","Liberation Sans",system-ui,sans-serif}
header.strip{background:var(--ink);color:var(--paper);padding:14px 28px;display:flex;
 align-items:baseline;gap:18px}
header.strip .mark{font-weight:700;letter-spacing:.18em;text-transform:lowercase}
header.strip .what{opacity:.75}
main{max-width:1120px;margin:0 auto;padding:22px 28px 60px}
h1{font-size:24px;margin:6px 0 4px;word-break:break-all}
h2{font-size:16px;margin:30px 0 10px;text-transform:lowercase;letter-spacing:.06em;
 border-bottom:2px solid var(--rule);padding-bottom:4px}
.sub{color:var(--muted);font-size:13px}
.badge{display:inline-block;padding:2px 12px;border-radius:3px;color:#fff;font-weight:700;
 font-size:13px;letter-spacing:.05em;text-transform:uppercase}
.facts{display:grid;grid-template-columns:repeat(auto-fill,minmax(170px,1fr));gap:10px;
 margin-top:16px}
.fact{background:var(--panel);border-left:4px solid var(--rule);padding:8px 12px}
.fact b{display:block;font-size:18px}
.fact span{color:var(--muted);font-size:12px}
table{border-collapse:collapse;width:100%;background:var(--panel);font-size:14px}
th,td{text-align:left;padding:6px 10px;border-bottom:1px solid var(--rule)}
th{font-size:12px;letter-spacing:.05em;color:var(--muted)}
th.sortable{cursor:pointer;user-select:none}
th.sortable:after{content:" \\2195";opacity:.4}
th[aria-sort=ascending]:after{content:" \\2191";opacity:1}
th[aria-sort=descending]:after{content:" \\2193";opacity:1}
td.num{font-variant-numeric:tabular-nums;text-align:right}
tr.v-unstable td:first-child{border-left:4px solid var(--v-unstable)}
tr.v-indeterminate td:first-child{border-left:4px solid var(--v-indeterminate)}
tr.v-failed td:first-child{border-left:4px solid var(--v-failed)}
tr.v-stable td:first-child{border-left:4px solid var(--v-stable)}
a{color:var(--curve)}
.dot{display:inline-block;width:9px;height:9px;border-radius:50%;margin-right:6px}
.tally{display:flex;height:16px;border-radius:3px;overflow:hidden;margin:14px 0 6px;
 background:var(--rule)}
.tally div{height:100%}
.legend{display:flex;flex-wrap:wrap;gap:16px;font-size:13px;color:var(--muted)}
figure{margin:18px 0;background:var(--panel);padding:10px;border:1px solid var(--rule)}
figure img{width:100%;height:auto;display:block}
figcaption{font-size:13px;color:var(--muted);margin-top:6px}
.diag{padding:6px 10px;margin:6px 0;background:var(--panel);border-left:4px solid var(--rule)}
.diag.blocking{border-left-color:var(--v-indeterminate)}
.diag code{font-size:12px;color:var(--muted)}
.note{font-size:13px;color:var(--muted);max-width:80ch}
td.why{font-size:13px;color:var(--muted);max-width:46ch}
.sweep{background:var(--panel);border-left:4px solid var(--v-indeterminate);padding:8px 12px}
.sweep b{display:inline-block;min-width:9em}
"""

_SORT_JS = """
(function(){
 var table=document.getElementById('variants'); if(!table) return;
 var body=table.tBodies[0];
 function key(row,col,kind){var v=row.cells[col].getAttribute('data-key');
  if(kind==='num'){var n=parseFloat(v);return isNaN(n)?Infinity:n;} return v||'';}
 function sortBy(th){
  var col=th.cellIndex, kind=th.getAttribute('data-kind');
  var dir=th.getAttribute('aria-sort')==='ascending'?-1:1;
  Array.prototype.forEach.call(table.tHead.rows[0].cells,function(c){c.removeAttribute('aria-sort');});
  th.setAttribute('aria-sort',dir===1?'ascending':'descending');
  var rows=Array.prototype.slice.call(body.rows);
  rows.sort(function(a,b){var x=key(a,col,kind),y=key(b,col,kind);
   if(x<y) return -dir; if(x>y) return dir; return a.getAttribute('data-order')-b.getAttribute('data-order');});
  rows.forEach(function(r){body.appendChild(r);});
 }
 Array.prototype.forEach.call(table.querySelectorAll('th.sortable'),function(th){
  th.addEventListener('click',function(){sortBy(th);});});
 var m=/sort=([a-z]+)(-desc)?/.exec(location.hash||'');
 if(m){var th=table.querySelector('th[data-name="'+m[1]+'"]');
  if(th){sortBy(th); if(m[2]) sortBy(th);}}
})();
"""



def _hash_source(text: str) -> str:
    """A CSP hash-source: 'sha256-' and the base64 of the SHA-256 of the UTF-8 text."""
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode()).digest()).decode() + "'"


_STYLE = style.css_variables() + _CSS
#: what a page may load and run (the <meta> form: frame-ancestors only works as a header)
PAGE_POLICY = "; ".join((
    "default-src 'none'", "img-src data:", "style-src 'unsafe-inline'",
    f"style-src-elem {_hash_source(_STYLE)}", "style-src-attr 'unsafe-inline'",
    f"script-src {_hash_source(_SORT_JS)}", "base-uri 'none'", "form-action 'none'",
))

_BASE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{{ policy }}">
<meta name="viewport" content="width=device-width,initial-scale=1">
<meta name="generator" content="ballast">
<title>{{ title }}</title>
<style>{{ style_sheet|safe }}</style></head>
<body><header class="strip"><span class="mark">ballast</span><span class="what">{{ kind }}</span>
</header><main>{% block main %}{% endblock %}</main>
{% block script %}{% endblock %}</body></html>
"""

_CHECK = """{% extends "base" %}{% block main %}
{% if batch_href %}<p class="sub"><a href="{{ batch_href }}">&larr; batch</a></p>{% endif %}
<h1>{{ name }}</h1>
<div class="sub">check {{ check.id }}{% if check.finished_at %} · finished {{ check.finished_at }}{% endif %}</div>
<p><span class="badge" style="background:{{ colour }}">{{ shown }}</span></p>
<section class="facts">
{% for label, value in facts %}<div class="fact" style="border-left-color:{{ colour }}"><b>{{ value }}</b><span>{{ label }}</span></div>{% endfor %}
</section>
{% if check.reason %}<h2>why it failed</h2><div class="diag blocking">{{ check.reason }}</div>{% endif %}
{% if modes %}<h2>where it oscillates</h2>
<table id="modes"><thead><tr><th>frequency</th><th>growth σ</th><th>Q</th><th>envelope</th><th>nodes, strongest first (share)</th><th>devices</th>{% if mode_symmetry %}<th>symmetry</th>{% endif %}<th>found by</th>{% if mode_pinned %}<th>pinned down by the data</th>{% endif %}<th>damping to try</th></tr></thead><tbody>
{% for m in modes %}<tr class="v-unstable"><td>{{ m.frequency }}</td><td class="num">{{ m.growth }}</td><td class="num">{{ m.q }}</td><td>{{ m.doubling }}</td><td>{{ m.nodes }}</td><td>{{ m.devices }}</td>{% if mode_symmetry %}<td>{{ m.symmetry }}</td>{% endif %}<td>{{ m.by }}</td>{% if mode_pinned %}<td>{{ m.pinned }}</td>{% endif %}<td>{{ m.hint }}</td></tr>{% endfor %}
</tbody></table>{% endif %}
{% if next_sweep %}<h2>what to sweep next</h2>
<div class="sweep" id="next-sweep"><div><b>band</b>{{ next_sweep.band }}</div><div><b>more points</b>{{ next_sweep.points }}</div>{% if next_sweep.reason %}<div><b>why</b>{{ next_sweep.reason }}</div>{% endif %}</div>{% endif %}
{% if assumptions %}<h2>what the verdict assumes</h2>
{% for a in assumptions %}<div class="diag"><code>{{ a.code }}</code><br>{{ a.message }}</div>{% endfor %}{% endif %}
{% if margin %}<h2>margin</h2>
{% if margin.facts %}<section class="facts">{% for label, value in margin.facts %}<div class="fact"><b>{{ value }}</b><span>{{ label }}</span></div>{% endfor %}</section>{% endif %}
{% if margin.rows %}<table id="margin"><thead><tr><th>least damped at</th><th>σ</th><th>ζ</th><th>Q</th><th>envelope</th><th>nodes, strongest first (share)</th><th>devices</th>{% if margin_symmetry %}<th>symmetry</th>{% endif %}</tr></thead><tbody>
{% for m in margin.rows %}<tr><td>{{ m.frequency }}</td><td class="num">{{ m.growth }}</td><td class="num">{{ m.zeta }}</td><td class="num">{{ m.q }}</td><td>{{ m.doubling }}</td><td>{{ m.nodes }}</td><td>{{ m.devices }}</td>{% if margin_symmetry %}<td>{{ m.symmetry }}</td>{% endif %}</tr>{% endfor %}
</tbody></table>{% endif %}{% if margin.note %}<p class="note">{{ margin.note }}</p>{% endif %}{% endif %}
{% if hints %}<h2>stabilisers to try</h2>
<p class="note">Each resistor is the largest at its place that, computed on this check's own data (the part added to the port data exactly), leaves no natural frequency in the right half-plane and brings the least-damped one in the band up to the target damping ratio. Re-check the circuit with the real part and its parasitics.</p>
<table id="hints"><thead><tr><th>where</th><th>resistor</th><th>least ζ with it</th><th>at</th><th>meets the target</th><th>growing after</th><th>in-band cost</th></tr></thead><tbody>
{% for h in hints %}<tr><td>{{ h.where }}</td><td class="num">{{ h.resistor }}</td><td class="num">{{ h.zeta }}</td><td>{{ h.least }}</td><td>{{ h.meets }}</td><td>{{ h.count }}</td><td>{{ h.cost }}</td></tr>{% endfor %}
</tbody></table>{% endif %}
{% if diagnostics %}<h2>what limited confidence</h2>
{% for d in diagnostics %}<div class="diag {{ d.severity }}"><code>{{ d.code }} · {{ d.severity }}</code><br>{{ d.message }}</div>{% endfor %}{% endif %}
{% if devices %}<h2>devices</h2>
<p class="note">The return difference F of each device, in switch-on order: how many right-half-plane natural frequencies switching it on adds (its clockwise turns around the origin), and how close F comes to 0.</p>
<table id="devices"><thead><tr><th>device</th><th>switched on</th><th>adds</th><th>closest |F|</th><th>at</th>{% if device_fmax %}<th>f_max</th>{% endif %}{% if device_why %}<th>why no count</th>{% endif %}</tr></thead><tbody>
{% for d in devices %}<tr><td>{{ d.name }}</td><td class="num">{{ d.order }}</td><td>{{ d.count }}</td><td class="num">{{ d.min }}</td><td>{{ d.at }}</td>{% if device_fmax %}<td>{{ d.fmax }}</td>{% endif %}{% if device_why %}<td class="why">{{ d.why }}</td>{% endif %}</tr>{% endfor %}
</tbody></table>
{% for f in device_figures %}<figure id="plot-{{ f.name }}"><img alt="{{ f.name }} plot" src="{{ f.src }}"><figcaption>{{ f.caption }}</figcaption></figure>{% endfor %}{% endif %}
{% if nodes %}<h2>nodes</h2>
<table><thead><tr><th>node</th><th>role</th><th>lowest Re Y</th><th>at</th><th>Kurokawa points</th></tr></thead><tbody>
{% for n in nodes %}<tr><td>{{ n.name }}</td><td>{{ n.role }}</td><td class="num">{{ n.min_re }}</td><td>{{ n.at }}</td><td>{{ n.kurokawa }}</td></tr>{% endfor %}
</tbody></table>{% endif %}
{% if two_port %}<h2>external two-port ({{ two_port.ports }})</h2>
<section class="facts">{% for label, value in two_port.facts %}<div class="fact"><b>{{ value }}</b><span>{{ label }}</span></div>{% endfor %}</section>
<p class="note">{{ two_port.proviso }}</p>{% endif %}
{% if figures %}<h2>pictures</h2>
{% for f in figures %}<figure id="plot-{{ f.name }}"><img alt="{{ f.name }} plot" src="{{ f.src }}"><figcaption>{{ f.caption }}{% if f.name == "admittance" and all_nodes_href %} <a href="{{ all_nodes_href }}">Every node's admittance</a>.{% endif %}</figcaption></figure>{% endfor %}
{% elif plots_note %}<h2>pictures</h2><p class="note">{{ plots_note }}</p>{% endif %}
{% endblock %}
"""

_BATCH = """{% extends "base" %}{% block main %}
<h1>{{ name }}</h1>
<div class="sub">batch {{ batch.id }}{% if batch.created_at %} · created {{ batch.created_at }}{% endif %} · {{ rows|length }} variants</div>
<div class="tally" role="img" aria-label="verdict tally">{% for t in tally %}<div title="{{ t.name }}: {{ t.count }}" style="width:{{ t.percent }}%;background:{{ t.colour }}"></div>{% endfor %}</div>
<div class="legend">{% for t in tally %}<span><span class="dot" style="background:{{ t.colour }}"></span>{{ t.name }} {{ t.count }}</span>{% endfor %}</div>
<h2>variants</h2>
<p class="note">Click a column heading to sort; click again to reverse. Worst verdicts come first. A link ending in #sort=frequency (or verdict, node, margin, variant, unstable, status; add -desc to reverse) opens the table sorted. Least ζ is the damping ratio of each variant's least-damped natural frequency in its band (below 0 it grows).{% if trend_href %} <a href="{{ trend_href }}">The margin across the variants</a>.{% endif %}</p>
<table id="variants"><thead><tr>
<th class="sortable" data-kind="text" data-name="variant">variant</th>
<th class="sortable" data-kind="num" data-name="verdict">verdict</th>
<th class="sortable num" data-kind="num" data-name="unstable">unstable</th>
<th class="sortable num" data-kind="num" data-name="frequency">first frequency</th>
<th class="sortable num" data-kind="num" data-name="margin" title="damping ratio of the least-damped natural frequency in the band; below 0 it grows">least ζ</th>
<th class="sortable" data-kind="text" data-name="node">node</th>
<th class="sortable" data-kind="text" data-name="status">status</th></tr></thead><tbody>
{% for r in rows %}<tr class="v-{{ r.state }}" data-order="{{ loop.index0 }}">
<td data-key="{{ r.name }}">{% if r.href %}<a href="{{ r.href }}">{{ r.name }}</a>{% else %}{{ r.name }}{% endif %}</td>
<td data-key="{{ r.severity }}"><span class="dot" style="background:{{ r.colour }}"></span>{{ r.state }}</td>
<td class="num" data-key="{{ r.count_key }}">{{ r.count }}</td>
<td class="num" data-key="{{ r.frequency_key }}">{{ r.frequency }}</td>
<td class="num" data-key="{{ r.margin_key }}"{% if r.margin_at %} title="at {{ r.margin_at }}"{% endif %}>{{ r.margin }}</td>
<td data-key="{{ r.node }}">{{ r.node }}</td>
<td data-key="{{ r.status }}">{{ r.status }}</td></tr>
{% endfor %}</tbody></table>
{% endblock %}{% block script %}<script>{{ script|safe }}</script>{% endblock %}
"""

_TREND = """{% extends "base" %}{% block main %}
{% if batch_href %}<p class="sub"><a href="{{ batch_href }}">&larr; batch</a></p>{% endif %}
<h1>{{ name }}</h1>
<div class="sub">batch {{ batch.id }} · {{ count }} variants · {{ located }} with a located natural frequency · {{ order_words }}</div>
<p class="note">{% if other_href %}<a href="{{ other_href }}">{{ other_words }}</a> · {% endif %}{% if csv_href %}<a href="{{ csv_href }}">the same as CSV</a>{% endif %}</p>
<figure id="plot-trend"><img alt="margin across the variants" src="{{ src }}"><figcaption>Top: the damping ratio ζ = −σ/|s| of each variant's least-damped natural frequency in its band, coloured by verdict; below the red line it grows, the dashed line is the target. Bottom: the frequency of that natural frequency. A variant whose natural frequencies could not be located leaves its column empty.</figcaption></figure>
{% endblock %}
"""

_ENV = Environment(autoescape=True,
                   loader=DictLoader({"base": _BASE, "check": _CHECK, "batch": _BATCH,
                                      "trend": _TREND}))


def _common() -> dict[str, Any]:
    return {"style_sheet": _STYLE, "policy": PAGE_POLICY}


def data_uri(content: bytes, fmt: str) -> str:
    mime = "image/svg+xml" if fmt == "svg" else "image/png"
    return f"data:{mime};base64,{base64.b64encode(content).decode()}"


def _figure(name: str, image: bytes, plot_format: str, caption: str) -> dict[str, str]:
    return {"name": name, "src": data_uri(image, plot_format), "caption": caption}


def check_page(check: Mapping[str, Any], plots: Mapping[str, bytes | None] | None = None,
               batch_href: str | None = None, plots_note: str | None = None,
               plot_format: str = "svg", device_notes: Mapping[str, str] | None = None,
               all_nodes_href: str | None = None) -> str:
    """The HTML page of one check: ``check`` is the API's check JSON (GET /v1/checks/{id}),
    ``plots`` maps plot names to rendered images (``plots.render_plot``; "device-<k>" for the
    k-th device's return difference), ``device_notes`` device names to why their count is null
    (``data.request_device_notes``)."""
    verdict = check.get("verdict") or {}
    shown = state_of(check)
    band = verdict.get("band_hz") or [None, None]
    facts = [
        ("verdict", shown),
        ("right-half-plane natural frequencies", check_rows.count_fact(verdict)),
        ("band", f"{format_hz(band[0])} – {format_hz(band[1])}"),
        ("points × ports", f"{verdict.get('n_points', '–')} × {verdict.get('n_ports', '–')}"),
        ("attempts", str(check.get("attempts", "–"))),
    ]
    if isinstance(verdict.get("count_complete"), bool):
        facts.insert(2, ("count complete", "yes" if verdict["count_complete"] else
                         "no: more may lie outside the band"))
    names = {str(d.get("order")): str(d.get("name")) for d in verdict.get("devices") or []}
    figures, device_figures = [], []
    for name, image in (plots or {}).items():
        if not image:
            continue
        if name.startswith("device-"):
            device = names.get(name.removeprefix("device-"), name)
            device_figures.append(_figure(name, image, plot_format,
                                          DEVICE_CAPTION.format(name=device)))
        else:
            figures.append(_figure(name, image, plot_format, PLOT_CAPTIONS.get(name, "")))
    modes = check_rows.mode_rows(verdict)
    devices = check_rows.device_rows(verdict, device_notes)
    margin = check_rows.margin_block(verdict)
    return _ENV.get_template("check").render(
        **_common(), title=f"ballast · {check.get('label') or check.get('id')}",
        kind="check report", check=check, name=check.get("label") or check.get("id"),
        shown=shown, colour=style.VERDICT_COLOURS.get(shown, style.MUTED), facts=facts,
        modes=modes, mode_symmetry=check_rows.has_column(modes, "symmetry"),
        mode_pinned=check_rows.has_column(modes, "pinned"),
        next_sweep=check_rows.next_sweep_block(verdict),
        assumptions=check_rows.assumption_rows(verdict),
        margin=margin, margin_symmetry=bool(margin) and check_rows.has_column(
            margin["rows"], "symmetry"),
        hints=check_rows.hint_rows(verdict),
        diagnostics=verdict.get("diagnostics") or [],
        devices=devices, device_fmax=check_rows.has_column(devices, "fmax"),
        device_why=check_rows.has_column(devices, "why"),
        device_figures=device_figures,
        nodes=check_rows.node_rows(verdict), two_port=check_rows.two_port_block(verdict),
        figures=figures, batch_href=batch_href, plots_note=plots_note,
        all_nodes_href=all_nodes_href,
    )


def batch_rows(items: list[Mapping[str, Any]],
               href: Callable[[Mapping[str, Any]], str | None],
               verdicts: Mapping[str, Mapping[str, Any]] | None = None
               ) -> list[dict[str, Any]]:
    rows = []
    for item in items:
        state = state_of(item)
        entry = least_damped((verdicts or {}).get(str(item.get("id"))) or (
            item.get("verdict") if isinstance(item.get("verdict"), Mapping) else None)) or {}
        zeta = entry.get("damping_ratio")
        zeta = zeta if isinstance(zeta, int | float) else None
        freq = item.get("first_unstable_frequency_hz")
        count = item.get("unstable_count")
        rows.append({
            "name": item.get("label") or item.get("id"), "href": href(item), "state": state,
            "severity": SEVERITY.get(state, 9),
            "colour": style.VERDICT_COLOURS.get(state, style.MUTED),
            "count": "–" if count is None else count, "count_key": "" if count is None else count,
            "frequency": format_hz(freq), "frequency_key": "" if freq is None else repr(freq),
            "node": item.get("first_unstable_node") or "–", "status": item.get("status") or "–",
            "margin": "–" if zeta is None else format_number(zeta, 3),
            "margin_key": "" if zeta is None else repr(float(zeta)),
            "margin_at": format_hz(entry.get("frequency_hz")) if zeta is not None else "",
        })
    rows.sort(key=lambda r: r["severity"])
    return rows


def batch_page(batch: Mapping[str, Any], items: list[Mapping[str, Any]],
               href: Callable[[Mapping[str, Any]], str | None],
               verdicts: Mapping[str, Mapping[str, Any]] | None = None,
               trend_href: str | None = None) -> str:
    """The HTML page of a batch: ``batch`` is GET /v1/batches/{id}, ``items`` every check of
    GET /v1/batches/{id}/checks, ``href(item)`` the link to that check's page (or None),
    ``verdicts`` check id → verdict JSON (for the margin column), ``trend_href`` the link to
    the margin across the variants (``trend_page``)."""
    rows = batch_rows(items, href, verdicts)
    counts: dict[str, int] = {}
    for row in rows:
        counts[row["state"]] = counts.get(row["state"], 0) + 1
    total = max(len(rows), 1)
    tally = [{"name": name, "count": counts[name], "percent": f"{100 * counts[name] / total:.3f}",
              "colour": style.VERDICT_COLOURS.get(name, style.MUTED)}
             for name in sorted(counts, key=lambda n: SEVERITY.get(n, 9))]
    return _ENV.get_template("batch").render(
        **_common(), title=f"ballast · {batch.get('label') or batch.get('id')}",
        kind="batch report", batch=batch, name=batch.get("label") or batch.get("id"),
        rows=rows, tally=tally, script=_SORT_JS, trend_href=trend_href,
    )


def trend_page(batch: Mapping[str, Any], rows: list[Any], image: bytes, order: str,
               other_href: str | None = None, csv_href: str | None = None,
               batch_href: str | None = None, plot_format: str = "svg") -> str:
    """The margin across a batch's variants (``trend.trend_rows`` in ``order``, drawn by
    ``plot_trend.trend_figure``), with links to the other order, the CSV and the batch."""
    by_label = order == "label"
    return _ENV.get_template("trend").render(
        **_common(), title=f"ballast · margin · {batch.get('label') or batch.get('id')}",
        kind="margin across variants", batch=batch,
        name=f"margin of {batch.get('label') or batch.get('id')}", count=len(rows),
        located=sum(1 for r in rows if getattr(r, "damping_ratio", None) is not None),
        order_words="by label" if by_label else "in submission order",
        other_words="in submission order" if by_label else "by label",
        other_href=other_href, csv_href=csv_href, batch_href=batch_href,
        src=data_uri(image, plot_format))
