"""Drawing primitives in figure coordinates: x to the right, y *up*, origin bottom-left.

Styles are named, not coloured: renderers map ``style`` names to strokes, dashes
and fills, so every chart reads without colour (dash patterns and markers carry
the meaning) and the web and the PDF stay alike.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Line:
    x1: float
    y1: float
    x2: float
    y2: float
    style: str = "axis"
    arrow: bool = False
    link: str | None = None


@dataclass(frozen=True)
class Polyline:
    points: tuple[tuple[float, float], ...]
    style: str = "series"
    closed: bool = False


@dataclass(frozen=True)
class Circle:
    cx: float
    cy: float
    r: float
    style: str = "grid"
    link: str | None = None
    title: str | None = None


@dataclass(frozen=True)
class Rect:
    x: float
    y: float
    width: float
    height: float
    style: str = "bar"
    link: str | None = None
    title: str | None = None


@dataclass(frozen=True)
class Text:
    x: float
    y: float
    text: str
    style: str = "label"
    anchor: str = "start"  # start | middle | end


Primitive = Line | Polyline | Circle | Rect | Text


@dataclass
class Figure:
    """A chart: its size in points (1/72 in) and its primitives, drawn in order."""

    width: float
    height: float
    items: list[Primitive] = field(default_factory=list)
    title: str = ""
    description: str = ""

    def add(self, *items: Primitive) -> Figure:
        self.items.extend(items)
        return self
