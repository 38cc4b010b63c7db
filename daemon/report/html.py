"""Self-contained HTML: one file, styles inline, figures embedded as SVG (vector), nothing fetched from anywhere."""

from __future__ import annotations

import base64
import html

from .model import Bullets, Figure, Heading, Para, Report, SignOff, Table

CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;max-width:60rem;margin:2rem auto;
padding:0 1rem;color:#1b1f23;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{font-size:1.25rem;border-bottom:1px solid #ccd;padding-bottom:.2rem;
margin-top:2rem}h3{font-size:1.05rem}
.sub{color:#555;margin-top:0}
table{border-collapse:collapse;margin:.6rem 0;font-size:.9rem}
th,td{border:1px solid #ccd;padding:.25rem .5rem;text-align:left;vertical-align:top}
th{background:#eef1f5}td.num{text-align:right;font-variant-numeric:tabular-nums}
caption{caption-side:bottom;color:#555;font-size:.85rem;text-align:left;padding-top:.3rem}
figure{margin:1rem 0}figure img{width:100%;max-width:46rem;border:1px solid #dde}
.number{font-weight:600}table.signoff td{height:2.6rem;min-width:9rem}
figcaption{color:#555;font-size:.85rem}
.note{color:#444;font-size:.92rem}.small{font-size:.85rem;color:#555}
.caution{background:#fff7e0;border-left:4px solid #e0a800;padding:.4rem .7rem}
ul.caution{padding-left:2rem}
@media print{body{margin:0;max-width:none}h2,h3{page-break-after:avoid}figure,table,.signoff{page-break-inside:avoid}}
"""


def _num(cell: str) -> bool:
    c = cell.replace("±", "").replace("−", "-").replace(" ", "").replace("–", "")
    try:
        float(c.split("(")[0] or "x")
    except ValueError:
        return False
    return True


def render_html(rep: Report) -> str:
    e = html.escape
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{e(rep.title)}</title><style>{CSS}</style></head><body>",
             f"<h1>{e(rep.title)}</h1>"]
    if rep.number:
        parts.append(f'<p class="sub number">Report {e(rep.number)}</p>')
    if rep.subtitle:
        parts.append(f'<p class="sub">{e(rep.subtitle)}</p>')
    for b in rep.blocks:
        if isinstance(b, Heading):
            lvl = min(max(b.level, 2), 4)
            parts.append(f"<h{lvl}>{e(b.text)}</h{lvl}>")
        elif isinstance(b, Para):
            cls = f' class="{b.style}"' if b.style else ""
            parts.append(f"<p{cls}>{e(b.text)}</p>")
        elif isinstance(b, Bullets):
            cls = f' class="{b.style}"' if b.style else ""
            parts.append(f"<ul{cls}>" + "".join(f"<li>{e(i)}</li>" for i in b.items) + "</ul>")
        elif isinstance(b, Table):
            head = "".join(f"<th>{e(h)}</th>" for h in b.headers)
            rows = "".join("<tr>" + "".join(
                f'<td class="num">{e(c)}</td>' if _num(c) else f"<td>{e(c)}</td>" for c in r) + "</tr>"
                for r in b.rows)
            cap = f"<caption>{e(b.caption)}</caption>" if b.caption else ""
            parts.append(f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>")
        elif isinstance(b, Figure):
            data = base64.b64encode(b.svg).decode("ascii")
            parts.append(f'<figure><img alt="{e(b.caption)}" src="data:image/svg+xml;base64,{data}">'
                         f"<figcaption>{e(b.caption)}</figcaption></figure>")
        elif isinstance(b, SignOff):
            if b.statement:
                parts.append(f'<p class="note">{e(b.statement)}</p>')
            rows = "".join(f"<tr><th>{e(r)}</th><td></td><td></td><td></td></tr>" for r in b.roles)
            parts.append('<table class="signoff"><thead><tr><th></th><th>Name</th><th>Signature</th><th>Date</th>'
                         f"</tr></thead><tbody>{rows}</tbody></table>")
    parts.append("</body></html>")
    return "\n".join(parts)
