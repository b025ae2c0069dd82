"""Render a :class:`~shopapp.charts.Figure` as an inline SVG string (escaped, no script)."""

from __future__ import annotations

from html import escape

from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Rect, Text
from shopapp.charts.styles import style


def _f(v: float) -> str:
    return f"{v:.2f}".rstrip("0").rstrip(".")


def _stroke(name: str) -> str:
    s = style(name)
    parts = [f'stroke="{s.stroke}"' if s.stroke else 'stroke="none"',
             f'stroke-width="{_f(s.width)}"', f'fill="{s.fill or "none"}"']
    if s.dash:
        parts.append(f'stroke-dasharray="{" ".join(_f(d) for d in s.dash)}"')
    return " ".join(parts)


def _wrap(el: str, link: str | None, title: str | None) -> str:
    if title:
        el = el.replace("/>", f"><title>{escape(title)}</title></{el[1:el.index(' ')]}>", 1)
    if link:
        return f'<a href="{escape(link, quote=True)}">{el}</a>'
    return el


def to_svg(fig: Figure, *, css_class: str = "chart") -> str:
    """The figure as ``<svg>…</svg>``; y is flipped so figure y grows upward."""
    h = fig.height

    def y(v: float) -> float:
        return h - v

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="{escape(css_class)}" role="img" '
        f'viewBox="0 0 {_f(fig.width)} {_f(h)}" width="{_f(fig.width)}" height="{_f(h)}">',
    ]
    if fig.title:
        out.append(f"<title>{escape(fig.title)}</title>")
    if fig.description:
        out.append(f"<desc>{escape(fig.description)}</desc>")
    out.append(
        '<defs><marker id="arrowhead" viewBox="0 0 10 10" refX="9" refY="5" markerWidth="6" '
        'markerHeight="6" orient="auto-start-reverse"><path d="M 0 0 L 10 5 L 0 10 z" '
        'fill="#1d232a"/></marker></defs>'
    )
    for item in fig.items:
        if isinstance(item, Line):
            marker = ' marker-end="url(#arrowhead)"' if item.arrow else ""
            el = (f'<line x1="{_f(item.x1)}" y1="{_f(y(item.y1))}" x2="{_f(item.x2)}" '
                  f'y2="{_f(y(item.y2))}" {_stroke(item.style)}{marker}/>')
            out.append(_wrap(el, item.link, None))
        elif isinstance(item, Polyline):
            pts = " ".join(f"{_f(px)},{_f(y(py))}" for px, py in item.points)
            tag = "polygon" if item.closed else "polyline"
            out.append(f'<{tag} points="{pts}" {_stroke(item.style)}/>')
        elif isinstance(item, Circle):
            el = (f'<circle cx="{_f(item.cx)}" cy="{_f(y(item.cy))}" r="{_f(item.r)}" '
                  f'{_stroke(item.style)}/>')
            out.append(_wrap(el, item.link, item.title))
        elif isinstance(item, Rect):
            el = (f'<rect x="{_f(item.x)}" y="{_f(y(item.y + item.height))}" '
                  f'width="{_f(item.width)}" height="{_f(item.height)}" {_stroke(item.style)}/>')
            out.append(_wrap(el, item.link, item.title))
        elif isinstance(item, Text):
            s = style(item.style)
            weight = ' font-weight="bold"' if s.bold else ""
            out.append(
                f'<text x="{_f(item.x)}" y="{_f(y(item.y))}" font-size="{_f(s.font_size)}" '
                f'fill="{s.fill or "#1d232a"}" text-anchor="{item.anchor}"{weight}>'
                f"{escape(item.text)}</text>"
            )
    out.append("</svg>")
    return "".join(out)
