"""One self-contained HTML file: CSS inline, figures embedded as PNG data, no external address.

A Content-Security-Policy in the page forbids the browser to load anything from anywhere, so
the file shows the same on a machine with no network. A few lines of inline script mark the
``<body>`` with ``data-images`` = ``"all-decoded"`` once every figure has decoded (checked by
the tests in a headless browser; harmless otherwise).
"""

from __future__ import annotations

import base64
import html

from dic.report._document import FigureBlock, Paragraph, Table

__all__ = ["render_html"]

_CSP = ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
        "script-src 'unsafe-inline'")

_CSS = """
:root { --ink: #1b1f24; --muted: #5b6470; --rule: #d5dae0; --band: #f3f5f7;
        --accent: #1f4e79; --warn: #8a4b08; --warnband: #fdf3e6; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 15px/1.5 -apple-system, "Segoe UI", "DejaVu Sans", "Liberation Sans", Arial,
             sans-serif; }
header { background: var(--accent); color: #fff; padding: 28px 0 22px; }
header .wrap, main, nav .wrap, footer { max-width: 1040px; margin: 0 auto; padding: 0 24px; }
header h1 { margin: 0 0 6px; font-size: 26px; font-weight: 600; }
header p { margin: 0; opacity: 0.9; }
nav { background: var(--band); border-bottom: 1px solid var(--rule); }
nav ol { margin: 0; padding: 10px 0; list-style: none; display: flex; flex-wrap: wrap;
         gap: 6px 18px; counter-reset: sec; }
nav li { counter-increment: sec; }
nav li::before { content: counter(sec) ". "; color: var(--muted); }
nav a { color: var(--accent); text-decoration: none; }
nav a:hover { text-decoration: underline; }
section { padding: 8px 0 18px; border-bottom: 1px solid var(--rule); }
section:last-of-type { border-bottom: none; }
h2 { font-size: 20px; margin: 22px 0 10px; color: var(--accent); }
p { margin: 8px 0; max-width: 80ch; }
p.note { color: var(--muted); font-size: 13.5px; }
p.caution { background: var(--warnband); border-left: 4px solid var(--warn);
            padding: 8px 12px; max-width: none; }
table { border-collapse: collapse; margin: 10px 0 14px; width: 100%; font-size: 14px; }
th, td { text-align: left; vertical-align: top; padding: 5px 10px;
         border-bottom: 1px solid var(--rule); }
th { background: var(--band); font-weight: 600; }
table.facts td:first-child { width: 32%; color: var(--muted); }
caption { caption-side: bottom; text-align: left; color: var(--muted); font-size: 13px;
          padding-top: 4px; }
figure { margin: 14px 0 20px; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 13.5px; margin-top: 6px; max-width: 90ch; }
footer { color: var(--muted); font-size: 13px; padding-top: 14px; padding-bottom: 30px; }
@media print {
  header { background: none; color: var(--ink); padding: 0; }
  nav { display: none; }
  section { break-before: page; border: none; }
  section:first-of-type { break-before: avoid; }
  figure, table { break-inside: avoid; }
}
"""

_SCRIPT = """
(function () {
  function mark() {
    var imgs = document.images, ok = 0;
    for (var i = 0; i < imgs.length; i++) {
      if (imgs[i].complete && imgs[i].naturalWidth > 0) { ok++; }
    }
    document.body.setAttribute('data-images', ok === imgs.length ? 'all-decoded'
                               : ok + '-of-' + imgs.length);
  }
  if (document.readyState === 'complete') { mark(); } else {
    window.addEventListener('load', mark);
  }
})();
"""


def _e(text):
    return html.escape(str(text), quote=True)


def _table(t: Table):
    out = ['<table class="facts">' if not t.header else "<table>"]
    if t.caption:
        out.append(f"<caption>{_e(t.caption)}</caption>")
    if t.header:
        out.append("<thead><tr>" + "".join(f"<th>{_e(h)}</th>" for h in t.header)
                   + "</tr></thead>")
    out.append("<tbody>")
    for row in t.rows:
        out.append("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in row) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def _figure(f: FigureBlock, number):
    data = base64.b64encode(f.png).decode("ascii")
    # shown at 100/120 of the pixel size: the PNG is rendered at 120 dpi, the page at 96
    w, h = round(f.width * 0.8), round(f.height * 0.8)
    return (f'<figure id="figure-{number}"><img src="data:image/png;base64,{data}" '
            f'alt="{_e(f.alt)}" width="{w}" height="{h}">'
            f"<figcaption><strong>Figure {number}.</strong> {_e(f.caption)}</figcaption>"
            "</figure>")


def render_html(doc):
    """The report as one HTML5 text (UTF-8) with everything embedded."""
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f'<meta name="generator" content="{_e(doc.footer)}">',
             f"<title>{_e(doc.title)}</title>", f"<style>{_CSS}</style>", "</head>",
             '<body data-images="pending">',
             f'<header><div class="wrap"><h1>{_e(doc.title)}</h1>'
             f"<p>{_e(doc.subtitle)} \u00b7 made {_e(doc.generated)}</p></div></header>",
             '<nav><div class="wrap"><ol>']
    parts += [f'<li><a href="#{s.id}">{_e(s.title)}</a></li>' for s in doc.sections]
    parts.append("</ol></div></nav>")
    parts.append("<main>")
    number = 0
    for i, s in enumerate(doc.sections, 1):
        parts.append(f'<section id="{s.id}"><h2>{i}. {_e(s.title)}</h2>')
        for b in s.blocks:
            if isinstance(b, Paragraph):
                cls = "" if b.kind == "text" else f' class="{_e(b.kind)}"'
                parts.append(f"<p{cls}>{_e(b.text)}</p>")
            elif isinstance(b, Table):
                parts.append(_table(b))
            elif isinstance(b, FigureBlock):
                number += 1
                parts.append(_figure(b, number))
        parts.append("</section>")
    parts.append("</main>")
    parts.append(f"<footer>{_e(doc.footer)}</footer>")
    parts.append(f"<script>{_SCRIPT}</script>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
