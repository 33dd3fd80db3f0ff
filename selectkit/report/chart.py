"""A small description of a figure, drawn as SVG text (the report) or as a matplotlib figure (notebooks).

The report's figures are described once, as data: a :class:`Chart` holds
panels, a :class:`Panel` holds layers (points, lines, bands, reference lines,
bars, stems, error bars, labels).  Two renderers draw the same description:

* :meth:`Chart.to_svg` writes SVG text directly, with numpy doing the
  coordinate arithmetic.  It costs a few milliseconds per figure whatever the
  number of rows (the layers already hold at most a bounded number of marks),
  needs no plotting library, and the page stays self-contained and sharp at
  any zoom.
* :meth:`Chart.to_matplotlib` builds a :class:`matplotlib.figure.Figure` on the
  Agg canvas (no pyplot, no global state) for users who restyle figures in a
  notebook.  matplotlib is imported only there.

A chart shows itself in Jupyter through ``_repr_svg_``.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Chart", "Panel", "Layer", "nice_ticks"]

#: Pixels per inch of the sizes given in inches (the report's former 80 dpi, so sizes read the same).
PX_PER_INCH = 80.0
_FONT = "system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif"
_CHAR_EM = 0.56  # mean advance of a character, in ems, for laying out labels (an estimate: no font metrics)


@dataclass(eq=False)
class Layer:
    """One set of marks of a panel.

    ``kind`` is one of ``points``, ``line``, ``band``, ``hline``, ``vline``,
    ``errorbar``, ``bars`` (vertical, from ``x`` to ``x + width`` up to
    ``y``), ``hbars`` (horizontal, at positions 0, 1, ... to ``x``),
    ``stems`` (from ``low`` to ``y`` at ``x``), ``labels`` (``texts`` at
    ``x, y``) or ``key`` (a legend entry without a mark).
    """

    kind: str
    x: np.ndarray | None = None
    y: np.ndarray | None = None
    low: np.ndarray | None = None
    high: np.ndarray | None = None
    width: np.ndarray | float | None = None
    color: str | list = "#24507a"
    alpha: float = 1.0
    line_width: float = 1.0
    dash: str = "-"
    marker: str | None = None
    size: float = 3.0
    hollow: bool = False
    label: str | None = None
    texts: list | None = None
    value: float | None = None


def _array(values):
    return None if values is None else np.asarray(values, dtype=float).reshape(-1)


@dataclass(eq=False)
class Panel:
    """One set of axes: title, axis labels, limits and layers (added by the methods, which return ``self``).

    ``xlim`` / ``ylim`` are ``(low, high)`` with either end ``None`` for the
    data's range; ``categories`` names the y positions 0, 1, ... (horizontal
    bars); ``notes`` are small grey lines in the lower right corner.
    """

    title: str = ""
    xlabel: str = ""
    ylabel: str = ""
    xlim: tuple | None = None
    ylim: tuple | None = None
    integer_x: bool = False
    categories: list | None = None
    legend: bool = False
    legend_size: float = 7.0
    label_size: float = 9.0
    title_size: float = 9.0
    notes: list = field(default_factory=list)
    layers: list = field(default_factory=list)

    def _add(self, layer: Layer) -> "Panel":
        self.layers.append(layer)
        return self

    def points(self, x, y, *, color="#24507a", alpha=0.7, size=3.0, hollow=False, line_width=1.0, label=None):
        """Dots of diameter ``size`` px at ``(x, y)`` (``hollow``: rings of ``line_width``)."""
        return self._add(Layer("points", _array(x), _array(y), color=color, alpha=alpha, size=size, hollow=hollow,
                               line_width=line_width, label=label))

    def line(self, x, y, *, color="#24507a", line_width=1.2, dash="-", marker=None, label=None):
        """A polyline through ``(x, y)`` (``dash`` ``-``, ``--`` or ``:``; ``marker`` ``o`` adds dots)."""
        return self._add(Layer("line", _array(x), _array(y), color=color, line_width=line_width, dash=dash,
                               marker=marker, label=label))

    def band(self, x, low, high, *, color="#8a8f98", alpha=0.25, label=None):
        """The area between ``low`` and ``high`` along ``x``."""
        return self._add(Layer("band", _array(x), low=_array(low), high=_array(high), color=color, alpha=alpha,
                               label=label))

    def hline(self, y, *, color="#8a8f98", line_width=0.8, dash="-", label=None):
        """A horizontal line across the panel at ``y``."""
        return self._add(Layer("hline", value=float(y), color=color, line_width=line_width, dash=dash,
                               label=label))

    def vline(self, x, *, color="#8a8f98", line_width=0.8, dash="-", label=None):
        """A vertical line across the panel at ``x``."""
        return self._add(Layer("vline", value=float(x), color=color, line_width=line_width, dash=dash,
                               label=label))

    def errorbar(self, x, y, low, high, *, color="#c0392b", marker="s", size=5.0, label=None):
        """Markers at ``(x, y)`` with vertical bars from ``low`` to ``high`` and caps."""
        return self._add(Layer("errorbar", _array(x), _array(y), low=_array(low), high=_array(high), color=color,
                               marker=marker, size=size, line_width=1.2, label=label))

    def bars(self, left, width, height, *, color="#24507a", alpha=0.55, label=None):
        """Vertical bars from ``left`` to ``left + width``, from zero up to ``height`` (a histogram)."""
        return self._add(Layer("bars", _array(left), _array(height), width=_array(width), color=color,
                               alpha=alpha, label=label))

    def hbars(self, values, *, colors, label=None):
        """Horizontal bars at positions 0, 1, ... from zero to ``values``, one colour each."""
        return self._add(Layer("hbars", _array(values), color=list(colors), label=label))

    def stems(self, x, y, *, color="#c0392b", low=0.0, size=2.5, label=None):
        """Vertical stems from ``low`` to ``y`` at ``x``, each with a dot at its top."""
        x = _array(x)
        return self._add(Layer("stems", x, _array(y), low=np.full(x.shape, float(low)), color=color, size=size,
                               label=label))

    def labels(self, x, y, texts, *, color="#c0392b", size=7.0):
        """Short texts just right of and above the points ``(x, y)``."""
        return self._add(Layer("labels", _array(x), _array(y), texts=[str(t) for t in texts], color=color,
                               size=size))

    def key(self, label):
        """A legend entry with no mark (something the panel cannot show, said in its legend)."""
        return self._add(Layer("key", label=label))


@dataclass(eq=False)
class Chart:
    """A figure: a title and panels laid out in ``columns`` columns; sizes in inches (80 px each)."""

    width: float = 6.0
    height: float = 4.0
    title: str = ""
    title_color: str = "#24507a"
    columns: int = 1
    panels: list = field(default_factory=list)

    def panel(self, **options) -> Panel:
        """Add a panel (options as :class:`Panel`) and return it."""
        item = Panel(**options)
        self.panels.append(item)
        return item

    def to_svg(self, *, namespace: bool = True) -> str:
        """The chart as one ``<svg>`` element (no XML prolog), sized in px, escaped, with no script.

        ``namespace=False`` leaves out the ``xmlns`` attribute, which SVG
        inside an HTML page does not need (the page then names no URL).
        """
        return _render_svg(self, namespace)

    def _repr_svg_(self) -> str:  # Jupyter
        return self.to_svg()

    def to_matplotlib(self):
        """The chart as a :class:`matplotlib.figure.Figure` on the Agg canvas (imports matplotlib)."""
        return _render_matplotlib(self)


# --------------------------------------------------------------------------- ranges and ticks

def nice_ticks(low: float, high: float, count: int = 5, *, integer: bool = False) -> np.ndarray:
    """About ``count`` round tick positions covering ``[low, high]``: steps of 1, 2, 2.5 or 5 times 10ᵏ.

    The rule (a step from the 1-2-5 sequence nearest the range over the count)
    is common practice in plotting; no source.
    """
    if not (math.isfinite(low) and math.isfinite(high)):
        return np.array([])
    if high <= low:
        return np.array([low])
    raw = (high - low) / max(count, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 2.5, 5.0, 10.0) if m * power >= raw * 0.999)
    if integer:
        step = max(1.0, round(step))
    first = math.ceil(low / step - 1e-9) * step
    ticks = np.arange(first, high + step * 1e-9, step)
    return np.where(np.abs(ticks) < step * 1e-9, 0.0, ticks)


def _tick_text(values: np.ndarray) -> list[str]:
    if values.size == 0:
        return []
    step = float(np.min(np.diff(values))) if values.size > 1 else abs(float(values[0])) or 1.0
    biggest = float(np.max(np.abs(values)))
    if biggest >= 1e5 or (0 < biggest < 1e-3):
        return [f"{v:.3g}" for v in values]
    decimals = max(0, -int(math.floor(math.log10(step) + 1e-9))) if step > 0 else 0
    if step > 0 and abs(step * 10 ** decimals - round(step * 10 ** decimals)) > 1e-6:
        decimals += 1  # steps of 2.5 need one more decimal
    return [f"{v:.{decimals}f}" for v in values]


def _data_range(panel: Panel, axis: str) -> tuple[float, float]:
    """The range the layers span along ``x`` or ``y`` (reference lines included), before padding."""
    values = []
    for layer in panel.layers:
        if axis == "x":
            if layer.kind == "vline":
                values.append([layer.value])
            elif layer.kind == "bars":
                values += [layer.x, layer.x + layer.width]
            elif layer.kind == "hbars":
                values += [layer.x, [0.0]]
            elif layer.x is not None and layer.kind != "labels":
                values.append(layer.x)
        else:
            if layer.kind == "hline":
                values.append([layer.value])
            elif layer.kind == "hbars":
                values.append([-0.6, len(layer.x) - 0.4])
            elif layer.kind == "bars":
                values += [layer.y, [0.0]]
            else:
                for part in (layer.y, layer.low, layer.high):
                    if part is not None and layer.kind != "labels":
                        values.append(part)
    flat = np.concatenate([np.asarray(v, float).reshape(-1) for v in values]) if values else np.array([])
    flat = flat[np.isfinite(flat)]
    if flat.size == 0:
        return 0.0, 1.0
    return float(flat.min()), float(flat.max())


def _limits(panel: Panel, axis: str) -> tuple[float, float]:
    low, high = _data_range(panel, axis)
    fixed = panel.xlim if axis == "x" else panel.ylim
    if high <= low:
        low, high = low - 0.5, high + 0.5
    pad = 0.05 * (high - low)
    if axis == "y" and panel.categories is not None:
        pad = 0.0
    low, high = low - pad, high + pad
    if fixed is not None:
        low = fixed[0] if fixed[0] is not None else low
        high = fixed[1] if fixed[1] is not None else high
    if high <= low:
        high = low + 1.0
    return float(low), float(high)


# --------------------------------------------------------------------------- SVG

def _esc(text) -> str:
    return html.escape(str(text), quote=True)


_DASH = {"-": "", "--": ' stroke-dasharray="5 3"', ":": ' stroke-dasharray="1.5 2.5"'}


def _num(values: np.ndarray) -> list[str]:
    """Pixel coordinates with one decimal (enough at any zoom a page is read at)."""
    # str() of a float rounded to one decimal is its shortest repr ("12.3", "4.0"): one C call per value
    return list(map(str, np.round(np.asarray(values, float), 1).tolist()))


def _path_points(px, py, size, color, alpha, hollow, line_width) -> str:
    if px.size == 0:
        return ""
    xs, ys = _num(px), _num(py)
    if hollow:
        return "".join(f'<circle cx="{a}" cy="{b}" r="{size / 2:.1f}" fill="none" stroke="{color}" '
                       f'stroke-width="{line_width:g}"/>' for a, b in zip(xs, ys))
    d = "".join(f"M{a} {b}h0" for a, b in zip(xs, ys))
    return (f'<path d="{d}" stroke="{color}" stroke-opacity="{alpha:g}" stroke-width="{size:g}" '
            f'stroke-linecap="round" fill="none"/>')


def _marker(kind, x, y, size, color) -> str:
    h = size / 2
    if kind == "s":
        return f'<rect x="{x - h:.1f}" y="{y - h:.1f}" width="{size:g}" height="{size:g}" fill="{color}"/>'
    if kind == "D":
        return (f'<path d="M{x:.1f} {y - h * 1.2:.1f}L{x + h:.1f} {y:.1f}L{x:.1f} {y + h * 1.2:.1f}'
                f'L{x - h:.1f} {y:.1f}Z" fill="{color}"/>')
    return f'<circle cx="{x:.1f}" cy="{y:.1f}" r="{h:.1f}" fill="{color}"/>'


def _text(x, y, text, *, size=9.0, anchor="start", color="#1f2a33", rotate=False, weight=None) -> str:
    turn = f' transform="rotate(-90 {x:.1f} {y:.1f})"' if rotate else ""
    bold = f' font-weight="{weight}"' if weight else ""
    return (f'<text x="{x:.1f}" y="{y:.1f}" font-size="{size:g}" text-anchor="{anchor}" fill="{color}"'
            f'{bold}{turn}>{_esc(text)}</text>')


def _text_width(text: str, size: float) -> float:
    return len(str(text)) * size * _CHAR_EM


def _fitted_size(text: str, size: float, room: float, smallest: float = 6.0) -> float:
    """The font size at most ``size`` at which ``text`` fits in ``room`` px (not below ``smallest``)."""
    need = _text_width(text, size)
    return size if need <= room else max(smallest, size * room / need)


def _layer_svg(layer: Layer, sx, sy, box) -> list[str]:
    left, top, right, bottom = box
    out = []
    color = layer.color
    if layer.kind == "points":
        keep = np.isfinite(layer.x) & np.isfinite(layer.y)
        out.append(_path_points(sx(layer.x[keep]), sy(layer.y[keep]), layer.size, color, layer.alpha,
                                layer.hollow, layer.line_width))
    elif layer.kind == "line":
        keep = np.isfinite(layer.x) & np.isfinite(layer.y)
        xs, ys = _num(sx(layer.x[keep])), _num(sy(layer.y[keep]))
        if xs:
            d = "M" + "L".join(f"{a} {b}" for a, b in zip(xs, ys))
            out.append(f'<path d="{d}" stroke="{color}" stroke-width="{layer.line_width:g}" fill="none"'
                       f'{_DASH[layer.dash]} stroke-linejoin="round"/>')
            if layer.marker:
                out += [_marker(layer.marker, float(a), float(b), 5.0, color) for a, b in zip(xs, ys)]
    elif layer.kind == "band":
        keep = np.isfinite(layer.x) & np.isfinite(layer.low) & np.isfinite(layer.high)
        xs = sx(layer.x[keep])
        if xs.size:
            upper = " ".join(f"{a} {b}" for a, b in zip(_num(xs), _num(sy(layer.high[keep]))))
            lower = " ".join(f"{a} {b}" for a, b in zip(_num(xs[::-1]), _num(sy(layer.low[keep][::-1]))))
            out.append(f'<path d="M{upper} L{lower}Z" fill="{color}" fill-opacity="{layer.alpha:g}" stroke="none"/>')
    elif layer.kind in ("hline", "vline"):
        if layer.kind == "hline":
            y = float(sy(np.array([layer.value]))[0])
            d = f"M{left:.1f} {y:.1f}H{right:.1f}"
        else:
            x = float(sx(np.array([layer.value]))[0])
            d = f"M{x:.1f} {top:.1f}V{bottom:.1f}"
        out.append(f'<path d="{d}" stroke="{color}" stroke-width="{layer.line_width:g}"{_DASH[layer.dash]}/>')
    elif layer.kind == "errorbar":
        px, py, lo, hi = sx(layer.x), sy(layer.y), sy(layer.low), sy(layer.high)
        d = "".join(f"M{a:.1f} {b:.1f}V{c:.1f}M{a - 3:.1f} {b:.1f}h6M{a - 3:.1f} {c:.1f}h6"
                    for a, b, c in zip(px, lo, hi) if np.isfinite(b) and np.isfinite(c))
        out.append(f'<path d="{d}" stroke="{color}" stroke-width="{layer.line_width:g}" fill="none"/>')
        out += [_marker(layer.marker, a, b, layer.size, color) for a, b in zip(px, py) if np.isfinite(b)]
    elif layer.kind == "bars":
        x0, x1 = sx(layer.x), sx(layer.x + layer.width)
        y0, y1 = sy(np.zeros_like(layer.y)), sy(layer.y)
        out += [f'<rect x="{a:.1f}" y="{min(c, d):.1f}" width="{max(b - a - 0.6, 0.4):.1f}" '
                f'height="{abs(d - c):.1f}" fill="{color}" fill-opacity="{layer.alpha:g}"/>'
                for a, b, c, d in zip(x0, x1, y0, y1)]
    elif layer.kind == "hbars":
        positions = np.arange(layer.x.size, dtype=float)
        x0, x1 = sx(np.zeros_like(layer.x)), sx(layer.x)
        ya, yb = sy(positions + 0.4), sy(positions - 0.4)
        colors = layer.color if isinstance(layer.color, list) else [layer.color] * layer.x.size
        out += [f'<rect x="{min(a, b):.1f}" y="{c:.1f}" width="{abs(b - a):.1f}" height="{d - c:.1f}" fill="{k}"/>'
                for a, b, c, d, k in zip(x0, x1, ya, yb, colors)]
    elif layer.kind == "stems":
        px, py, lo = sx(layer.x), sy(layer.y), sy(layer.low)
        if px.size:
            d = "".join(f"M{a:.1f} {c:.1f}V{b:.1f}" for a, b, c in zip(px, py, lo))
            out.append(f'<path d="{d}" stroke="{color}" stroke-width="0.9" fill="none"/>')
            out.append(_path_points(px, py, layer.size, color, 1.0, False, 1.0))
    elif layer.kind == "labels":
        out += [_text(a + 2, b - 2, t, size=layer.size, color=color)
                for a, b, t in zip(sx(layer.x), sy(layer.y), layer.texts)]
    return out


def _legend_svg(panel: Panel, left: float, top: float) -> list[str]:
    entries = [layer for layer in panel.layers if layer.label]
    if not entries:
        return []
    size = panel.legend_size
    line = size * 1.45
    width = 22 + max(_text_width(e.label, size) for e in entries)
    out = [f'<rect x="{left + 4:.1f}" y="{top + 4:.1f}" width="{width + 8:.1f}" height="{line * len(entries) + 6:.1f}" '
           f'fill="#fff" fill-opacity="0.85"/>']
    for i, e in enumerate(entries):
        y = top + 7 + line * (i + 0.5)
        x = left + 8
        if e.kind == "points" and e.hollow:
            out.append(f'<circle cx="{x + 7:.1f}" cy="{y:.1f}" r="3.5" fill="none" stroke="{e.color}" '
                       f'stroke-width="{e.line_width:g}"/>')
        elif e.kind in ("points", "stems"):
            out.append(_marker("o", x + 7, y, min(e.size, 5.0), e.color))
        elif e.kind == "errorbar":
            out.append(f'<path d="M{x + 7:.1f} {y - 5:.1f}V{y + 5:.1f}" stroke="{e.color}"/>')
            out.append(_marker(e.marker, x + 7, y, 5.0, e.color))
        elif e.kind in ("band", "bars", "hbars"):
            fill = e.color if isinstance(e.color, str) else e.color[0]
            out.append(f'<rect x="{x:.1f}" y="{y - 4:.1f}" width="14" height="8" fill="{fill}" '
                       f'fill-opacity="{max(e.alpha, 0.3):g}"/>')
        elif e.kind != "key":
            out.append(f'<path d="M{x:.1f} {y:.1f}h14" stroke="{e.color}" stroke-width="{max(e.line_width, 1):g}"'
                       f'{_DASH[e.dash]}/>')
        out.append(_text(x + 18, y + size * 0.35, e.label, size=size))
    return out


def _panel_svg(panel: Panel, x0: float, y0: float, w: float, h: float) -> list[str]:
    """Draw ``panel`` in the cell at ``(x0, y0)`` of size ``w × h`` px."""
    label = panel.label_size
    tick_size = max(label - 1.0, 6.5)
    xlo, xhi = _limits(panel, "x")
    ylo, yhi = _limits(panel, "y")
    if panel.categories is not None:
        yticks = np.arange(len(panel.categories), dtype=float)
        ytext = [str(c) for c in panel.categories]
    else:
        yticks = nice_ticks(ylo, yhi)
        ytext = _tick_text(yticks)
    xticks = nice_ticks(xlo, xhi, integer=panel.integer_x)
    xtext = _tick_text(xticks)
    gutter = max((_text_width(t, tick_size) for t in ytext), default=10) + 6
    left = x0 + gutter + (label * 1.4 if panel.ylabel else 4)
    right = x0 + w - 10
    top = y0 + (panel.title_size * 1.9 if panel.title else 8)
    bottom = y0 + h - (tick_size * 1.6 + (label * 1.6 if panel.xlabel else 0) + 4)
    if right - left < 20 or bottom - top < 20:
        return []

    def sx(v):
        return left + (np.asarray(v, float) - xlo) / (xhi - xlo) * (right - left)

    def sy(v):
        return bottom - (np.asarray(v, float) - ylo) / (yhi - ylo) * (bottom - top)

    out = [f'<rect x="{left:.1f}" y="{top:.1f}" width="{right - left:.1f}" height="{bottom - top:.1f}" '
           f'fill="#fff" stroke="#b8bcc2" stroke-width="0.8"/>']
    ticks = []
    for t, s in zip(xticks, xtext):
        if xlo - 1e-12 <= t <= xhi + 1e-12:
            px = float(sx(t))
            ticks.append(f"M{px:.1f} {bottom:.1f}v3")
            out.append(_text(px, bottom + 3 + tick_size, s, size=tick_size, anchor="middle"))
    for t, s in zip(yticks, ytext):
        if ylo - 1e-12 <= t <= yhi + 1e-12:
            py = float(sy(t))
            ticks.append(f"M{left:.1f} {py:.1f}h-3")
            out.append(_text(left - 5, py + tick_size * 0.35, s, size=tick_size, anchor="end"))
    out.append(f'<path d="{"".join(ticks)}" stroke="#6b7178" stroke-width="0.8"/>')
    # the plot area as a nested viewport: whatever falls outside the limits is clipped by the viewer
    out.append(f'<svg x="{left:.1f}" y="{top:.1f}" width="{right - left:.1f}" height="{bottom - top:.1f}" '
               f'viewBox="{left:.1f} {top:.1f} {right - left:.1f} {bottom - top:.1f}" overflow="hidden">')
    for layer in panel.layers:
        out += _layer_svg(layer, sx, sy, (left, top, right, bottom))
    out.append("</svg>")
    middle = (left + right) / 2
    if panel.title:
        out.append(_text((left + right) / 2, y0 + panel.title_size * 1.3, panel.title, anchor="middle",
                         size=_fitted_size(panel.title, panel.title_size, 2 * min(middle - x0, x0 + w - middle) - 6)))
    if panel.xlabel:
        out.append(_text((left + right) / 2, y0 + h - 5, panel.xlabel, anchor="middle",
                         size=_fitted_size(panel.xlabel, label, 2 * min(middle - x0, x0 + w - middle) - 6)))
    if panel.ylabel:
        out.append(_text(x0 + label, (top + bottom) / 2, panel.ylabel, anchor="middle", rotate=True,
                         size=_fitted_size(panel.ylabel, label, bottom - top)))
    for i, note in enumerate(reversed(panel.notes)):
        out.append(_text(right - 3, bottom - 4 - i * 9, note, size=7, anchor="end", color="#8a8f98"))
    if panel.legend:
        out += _legend_svg(panel, left, top)
    return out


def _render_svg(chart: Chart, namespace: bool = True) -> str:
    width, height = chart.width * PX_PER_INCH, chart.height * PX_PER_INCH
    head = 26.0 if chart.title else 4.0
    columns = max(1, min(chart.columns, len(chart.panels) or 1))
    rows = max(1, math.ceil(len(chart.panels) / columns))
    cell_w, cell_h = width / columns, (height - head) / rows
    xmlns = ' xmlns="http://www.w3.org/2000/svg"' if namespace else ""
    out = [f'<svg{xmlns} width="{width:.0f}" height="{height:.0f}" '
           f'viewBox="0 0 {width:.0f} {height:.0f}" font-family="{_FONT}" role="img">',
           f'<rect width="{width:.0f}" height="{height:.0f}" fill="#fff"/>']
    if chart.title:
        out.append(_text(width / 2, 17, chart.title, size=10.5, anchor="middle", color=chart.title_color,
                         weight="600"))
    for i, panel in enumerate(chart.panels):
        r, c = divmod(i, columns)
        out += _panel_svg(panel, c * cell_w, head + r * cell_h, cell_w, cell_h)
    out.append("</svg>")
    return "".join(out)


# --------------------------------------------------------------------------- matplotlib

_MPL_DASH = {"-": "-", "--": "--", ":": ":"}


def _render_matplotlib(chart: Chart):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import MaxNLocator

    figure = Figure(figsize=(chart.width, chart.height))
    FigureCanvasAgg(figure)
    columns = max(1, min(chart.columns, len(chart.panels) or 1))
    rows = max(1, math.ceil(len(chart.panels) / columns))
    figure.subplots_adjust(left=0.1, right=0.97, bottom=0.5 / chart.height, top=1.0 - 0.45 / chart.height,
                           wspace=0.32, hspace=0.55)

    def plain(text):  # "$" would start matplotlib's math mode
        return None if text is None else str(text).replace("$", r"\$")

    for i, panel in enumerate(chart.panels):
        ax = figure.add_subplot(rows, columns, i + 1)
        for layer in panel.layers:
            label = plain(layer.label)
            if layer.kind == "points":
                if layer.hollow:
                    ax.scatter(layer.x, layer.y, s=layer.size ** 2, facecolors="none", edgecolors=layer.color,
                               linewidths=layer.line_width, label=label, zorder=3)
                else:
                    ax.scatter(layer.x, layer.y, s=layer.size ** 2, color=layer.color, alpha=layer.alpha,
                               linewidths=0, label=label)
            elif layer.kind == "line":
                ax.plot(layer.x, layer.y, color=layer.color, linewidth=layer.line_width,
                        linestyle=_MPL_DASH[layer.dash], marker=layer.marker, label=label)
            elif layer.kind == "band":
                ax.fill_between(layer.x, layer.low, layer.high, color=layer.color, alpha=layer.alpha, linewidth=0,
                                label=label)
            elif layer.kind == "hline":
                ax.axhline(layer.value, color=layer.color, linewidth=layer.line_width,
                           linestyle=_MPL_DASH[layer.dash], label=label)
            elif layer.kind == "vline":
                ax.axvline(layer.value, color=layer.color, linewidth=layer.line_width,
                           linestyle=_MPL_DASH[layer.dash], label=label)
            elif layer.kind == "errorbar":
                ax.errorbar(layer.x, layer.y, yerr=[layer.y - layer.low, layer.high - layer.y], fmt=layer.marker,
                            color=layer.color, markersize=layer.size, capsize=3, linewidth=layer.line_width,
                            label=label)
            elif layer.kind == "bars":
                ax.bar(layer.x, layer.y, width=layer.width, align="edge", color=layer.color, alpha=layer.alpha,
                       edgecolor="white", linewidth=0.5, label=label)
            elif layer.kind == "hbars":
                ax.barh(np.arange(layer.x.size), layer.x, color=layer.color, label=label)
            elif layer.kind == "stems":
                ax.vlines(layer.x, layer.low, layer.y, color=layer.color, linewidth=0.9)
                ax.scatter(layer.x, layer.y, s=layer.size ** 2, color=layer.color, label=label)
            elif layer.kind == "labels":
                for a, b, t in zip(layer.x, layer.y, layer.texts):
                    ax.annotate(plain(t), (a, b), fontsize=layer.size, color=layer.color, xytext=(2, 2),
                                textcoords="offset points")
            elif layer.kind == "key":
                ax.plot([], [], " ", label=label)
        if panel.categories is not None:
            ax.set_yticks(range(len(panel.categories)), [plain(c) for c in panel.categories], fontsize=8)
        xlo, xhi = _limits(panel, "x")
        ylo, yhi = _limits(panel, "y")
        ax.set_xlim(xlo, xhi)
        ax.set_ylim(ylo, yhi)
        if panel.integer_x:
            ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_title(plain(panel.title), fontsize=panel.title_size)
        ax.set_xlabel(plain(panel.xlabel), fontsize=panel.label_size)
        ax.set_ylabel(plain(panel.ylabel), fontsize=panel.label_size)
        for j, note in enumerate(reversed(panel.notes)):
            ax.text(0.99, 0.01 + 0.05 * j, plain(note), ha="right", va="bottom", fontsize=7, color="#8a8f98",
                    transform=ax.transAxes)
        if panel.legend and any(layer.label for layer in panel.layers):
            ax.legend(fontsize=panel.legend_size, loc="upper left", frameon=True, facecolor="white",
                      framealpha=0.85, edgecolor="none")
    if chart.title:
        figure.suptitle(plain(chart.title), fontsize=10, color=chart.title_color)
    return figure
