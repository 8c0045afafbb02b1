# ruff: noqa: E501  (the HTML, CSS and script templates below keep their natural line lengths)
"""HTML pages: one per check (facts, modes, diagnostics and its plots) and one per batch (a table
of variants sortable by verdict, frequency and node, each row linking to its check's page).

Pages are self-contained: CSS and the small sorting script are inline, plots are embedded as
``data:`` URIs, so a page can be mailed, archived by CI or served as it is.
"""

from __future__ import annotations

import base64
from collections.abc import Callable, Mapping
from typing import Any

from jinja2 import DictLoader, Environment

from service.reports import style
from service.reports.outcomes import state_of
from service.reports.units import format_hz, format_number, format_siemens

PLOT_CAPTIONS = {
    "ndf": "NDF contour. Each clockwise turn around the origin (red cross) is one natural "
           "frequency in the right half-plane; the right panel magnifies the origin.",
    "admittance": "Driving-point admittance. A node can start to oscillate where Im Y rises "
                  "through zero while Re Y ≤ 0 (diamonds); dashed red lines are unstable modes.",
    "factors": "K and mu of the external two-port. Shaded bands: some passive termination could "
               "make the two-port oscillate. Loops inside the circuit are invisible here.",
    "circles": "Stability circles at a few telling frequencies; the shaded side of each circle "
               "holds the terminations that would make the other port's reflection exceed 1.",
}

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

_BASE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width,initial-scale=1">
<meta name="generator" content="ballast">
<title>{{ title }}</title>
<style>{{ css_vars|safe }}{{ css|safe }}</style></head>
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
<table><thead><tr><th>frequency</th><th>growth (1/s)</th><th>nodes, strongest first</th><th>devices</th><th>found by</th><th>first-order damping</th></tr></thead><tbody>
{% for m in modes %}<tr class="v-unstable"><td>{{ m.frequency }}</td><td class="num">{{ m.growth }}</td><td>{{ m.nodes }}</td><td>{{ m.devices }}</td><td>{{ m.by }}</td><td>{{ m.hint }}</td></tr>{% endfor %}
</tbody></table>{% endif %}
{% if diagnostics %}<h2>what limited confidence</h2>
{% for d in diagnostics %}<div class="diag {{ d.severity }}"><code>{{ d.code }} · {{ d.severity }}</code><br>{{ d.message }}</div>{% endfor %}{% endif %}
{% if nodes %}<h2>nodes</h2>
<table><thead><tr><th>node</th><th>role</th><th>lowest Re Y</th><th>at</th><th>Kurokawa points</th></tr></thead><tbody>
{% for n in nodes %}<tr><td>{{ n.name }}</td><td>{{ n.role }}</td><td class="num">{{ n.min_re }}</td><td>{{ n.at }}</td><td>{{ n.kurokawa }}</td></tr>{% endfor %}
</tbody></table>{% endif %}
{% if two_port %}<h2>external two-port ({{ two_port.ports }})</h2>
<section class="facts">{% for label, value in two_port.facts %}<div class="fact"><b>{{ value }}</b><span>{{ label }}</span></div>{% endfor %}</section>
<p class="note">{{ two_port.proviso }}</p>{% endif %}
{% if figures %}<h2>pictures</h2>
{% for f in figures %}<figure id="plot-{{ f.name }}"><img alt="{{ f.name }} plot" src="{{ f.src }}"><figcaption>{{ f.caption }}</figcaption></figure>{% endfor %}
{% elif plots_note %}<h2>pictures</h2><p class="note">{{ plots_note }}</p>{% endif %}
{% endblock %}
"""

_BATCH = """{% extends "base" %}{% block main %}
<h1>{{ name }}</h1>
<div class="sub">batch {{ batch.id }}{% if batch.created_at %} · created {{ batch.created_at }}{% endif %} · {{ rows|length }} variants</div>
<div class="tally" role="img" aria-label="verdict tally">{% for t in tally %}<div title="{{ t.name }}: {{ t.count }}" style="width:{{ t.percent }}%;background:{{ t.colour }}"></div>{% endfor %}</div>
<div class="legend">{% for t in tally %}<span><span class="dot" style="background:{{ t.colour }}"></span>{{ t.name }} {{ t.count }}</span>{% endfor %}</div>
<h2>variants</h2>
<p class="note">Click a column heading to sort; click again to reverse. Worst verdicts come first. A link ending in #sort=frequency (or verdict, node, variant, unstable, status; add -desc to reverse) opens the table sorted.</p>
<table id="variants"><thead><tr>
<th class="sortable" data-kind="text" data-name="variant">variant</th>
<th class="sortable" data-kind="num" data-name="verdict">verdict</th>
<th class="sortable num" data-kind="num" data-name="unstable">unstable</th>
<th class="sortable num" data-kind="num" data-name="frequency">first frequency</th>
<th class="sortable" data-kind="text" data-name="node">node</th>
<th class="sortable" data-kind="text" data-name="status">status</th></tr></thead><tbody>
{% for r in rows %}<tr class="v-{{ r.state }}" data-order="{{ loop.index0 }}">
<td data-key="{{ r.name }}">{% if r.href %}<a href="{{ r.href }}">{{ r.name }}</a>{% else %}{{ r.name }}{% endif %}</td>
<td data-key="{{ r.severity }}"><span class="dot" style="background:{{ r.colour }}"></span>{{ r.state }}</td>
<td class="num" data-key="{{ r.count_key }}">{{ r.count }}</td>
<td class="num" data-key="{{ r.frequency_key }}">{{ r.frequency }}</td>
<td data-key="{{ r.node }}">{{ r.node }}</td>
<td data-key="{{ r.status }}">{{ r.status }}</td></tr>
{% endfor %}</tbody></table>
{% endblock %}{% block script %}<script>{{ script|safe }}</script>{% endblock %}
"""

_ENV = Environment(autoescape=True,
                   loader=DictLoader({"base": _BASE, "check": _CHECK, "batch": _BATCH}))


def _common() -> dict[str, Any]:
    return {"css": _CSS, "css_vars": style.css_variables()}


def _modes(verdict: dict[str, Any]) -> list[dict[str, str]]:
    rows = []
    for mode in verdict.get("modes") or []:
        hint = mode.get("hint") or {}
        rows.append({
            "frequency": format_hz(mode.get("frequency_hz")),
            "growth": format_number(mode.get("growth_rate_per_s"), 3),
            "nodes": ", ".join((mode.get("nodes") or [])[:4]) or "–",
            "devices": ", ".join(mode.get("devices") or []) or "–",
            "by": str(mode.get("estimated_by") or "–").replace("_", " "),
            "hint": (f"{format_number(hint.get('shunt_resistance_ohm'), 3)} Ω shunt at "
                     f"{hint.get('node')}" if hint else "–"),
        })
    return rows


def _nodes(verdict: dict[str, Any]) -> list[dict[str, str]]:
    rows = []
    for node in verdict.get("nodes") or []:
        points = node.get("kurokawa") or []
        rows.append({
            "name": node.get("name"), "role": node.get("role"),
            "min_re": format_siemens(node.get("min_re_admittance_s")),
            "at": format_hz(node.get("min_re_at_hz")),
            "kurokawa": ", ".join(format_hz(p.get("frequency_hz")) for p in points) or "–",
        })
    return rows


def _two_port(verdict: dict[str, Any]) -> dict[str, Any] | None:
    tp = verdict.get("two_port")
    if not tp:
        return None
    bands = tp.get("unstable_bands_hz") or []
    return {
        "ports": " → ".join(tp.get("ports") or []),
        "facts": [
            ("lowest K", f"{format_number(tp.get('k_min'), 3)} @ {format_hz(tp.get('k_min_hz'))}"),
            ("lowest mu", f"{format_number(tp.get('mu_min'), 3)} @ "
                          f"{format_hz(tp.get('mu_min_hz'))}"),
            ("bands with mu < 1", "; ".join(f"{format_hz(lo)} – {format_hz(hi)}"
                                           for lo, hi in bands) or "none"),
            ("unconditionally stable ports", "yes" if tp.get("unconditionally_stable") else "no"),
        ],
        "proviso": tp.get("proviso") or "",
    }


def data_uri(content: bytes, fmt: str) -> str:
    mime = "image/svg+xml" if fmt == "svg" else "image/png"
    return f"data:{mime};base64,{base64.b64encode(content).decode()}"


def check_page(check: Mapping[str, Any], plots: Mapping[str, bytes | None] | None = None,
               batch_href: str | None = None, plots_note: str | None = None,
               plot_format: str = "svg") -> str:
    """The HTML page of one check: ``check`` is the API's check JSON (GET /v1/checks/{id}),
    ``plots`` maps plot names to rendered images (``plots.render_plot``)."""
    verdict = check.get("verdict") or {}
    shown = state_of(check)
    band = verdict.get("band_hz") or [None, None]
    facts = [
        ("verdict", shown),
        ("right-half-plane natural frequencies",
         "–" if verdict.get("unstable_count") is None else str(verdict["unstable_count"])),
        ("band", f"{format_hz(band[0])} – {format_hz(band[1])}"),
        ("points × ports", f"{verdict.get('n_points', '–')} × {verdict.get('n_ports', '–')}"),
        ("attempts", str(check.get("attempts", "–"))),
    ]
    figures = [{"name": name, "src": data_uri(image, plot_format),
                "caption": PLOT_CAPTIONS.get(name, "")}
               for name, image in (plots or {}).items() if image]
    return _ENV.get_template("check").render(
        **_common(), title=f"ballast · {check.get('label') or check.get('id')}",
        kind="check report", check=check, name=check.get("label") or check.get("id"),
        shown=shown, colour=style.VERDICT_COLOURS.get(shown, style.MUTED), facts=facts,
        modes=_modes(verdict), diagnostics=verdict.get("diagnostics") or [],
        nodes=_nodes(verdict), two_port=_two_port(verdict), figures=figures,
        batch_href=batch_href, plots_note=plots_note,
    )


def batch_rows(items: list[Mapping[str, Any]],
               href: Callable[[Mapping[str, Any]], str | None]) -> list[dict[str, Any]]:
    rows = []
    for item in items:
        state = state_of(item)
        freq = item.get("first_unstable_frequency_hz")
        count = item.get("unstable_count")
        rows.append({
            "name": item.get("label") or item.get("id"), "href": href(item), "state": state,
            "severity": SEVERITY.get(state, 9),
            "colour": style.VERDICT_COLOURS.get(state, style.MUTED),
            "count": "–" if count is None else count, "count_key": "" if count is None else count,
            "frequency": format_hz(freq), "frequency_key": "" if freq is None else repr(freq),
            "node": item.get("first_unstable_node") or "–", "status": item.get("status") or "–",
        })
    rows.sort(key=lambda r: r["severity"])
    return rows


def batch_page(batch: Mapping[str, Any], items: list[Mapping[str, Any]],
               href: Callable[[Mapping[str, Any]], str | None]) -> str:
    """The HTML page of a batch: ``batch`` is GET /v1/batches/{id}, ``items`` every check of
    GET /v1/batches/{id}/checks, ``href(item)`` the link to that check's page (or None)."""
    rows = batch_rows(items, href)
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
        rows=rows, tally=tally, script=_SORT_JS,
    )
