"""Where a text sits and whether two texts collide; place a label clear of the others.

A text's box is estimated from its style's font size: width ``0.56·size`` per
character (a sans-serif average, our estimate), from ``0.25·size`` below the
baseline to ``0.8·size`` above it, shifted by the anchor. The estimate is used
both to lay labels out and by the tests that check labels do not overlap.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from shopapp.charts.primitives import Text
from shopapp.charts.styles import style

CHAR_WIDTH = 0.56  # of the font size, average sans-serif glyph (our estimate)
GAP = 2.0  # points kept free between two labels


def text_width(text: str, font_size: float) -> float:
    """Estimated width of ``text`` in points."""
    return CHAR_WIDTH * font_size * len(text)


def text_box(t: Text) -> tuple[float, float, float, float]:
    """``(x0, y0, x1, y1)`` of a text in figure points (y up)."""
    size = style(t.style).font_size
    w = text_width(t.text, size)
    if t.anchor == "middle":
        x0 = t.x - w / 2.0
    elif t.anchor == "end":
        x0 = t.x - w
    else:
        x0 = t.x
    return x0, t.y - 0.25 * size, x0 + w, t.y + 0.8 * size


def collide(a: Text, b: Text, gap: float = GAP) -> bool:
    """True when the boxes of ``a`` and ``b`` come closer than ``gap``."""
    ax0, ay0, ax1, ay1 = text_box(a)
    bx0, by0, bx1, by1 = text_box(b)
    return ax0 < bx1 + gap and bx0 < ax1 + gap and ay0 < by1 + gap and by0 < ay1 + gap


def inside(t: Text, x0: float, y0: float, x1: float, y1: float) -> bool:
    """True when the box of ``t`` lies within the rectangle."""
    bx0, by0, bx1, by1 = text_box(t)
    return bx0 >= x0 and by0 >= y0 and bx1 <= x1 and by1 <= y1


def place(candidates: Iterable[Text], placed: Iterable[Text],
          bounds: tuple[float, float, float, float] | None = None) -> Text | None:
    """The first candidate clear of every placed text (and inside ``bounds``), or None.

    The placed texts' boxes are worked out once, not once per candidate; ``candidates``
    may be a generator, so those after the first that fits are never made.
    """
    taken = [text_box(t) for t in placed]
    for c in candidates:
        x0, y0, x1, y1 = text_box(c)
        if bounds is not None and not (x0 >= bounds[0] and y0 >= bounds[1]
                                       and x1 <= bounds[2] and y1 <= bounds[3]):
            continue  # as inside()
        if not any(x0 < bx1 + GAP and bx0 < x1 + GAP and y0 < by1 + GAP and by0 < y1 + GAP
                   for bx0, by0, bx1, by1 in taken):  # as collide()
            return c
    return None


def collisions(texts: Sequence[Text], gap: float = 0.0) -> list[tuple[str, str]]:
    """Pairs of texts whose boxes overlap (for the tests)."""
    out = []
    for i, a in enumerate(texts):
        for b in texts[i + 1:]:
            if collide(a, b, gap):
                out.append((a.text, b.text))
    return out
