"""Charts of a valuation, each a reportlab.graphics Drawing (PDF and SVG alike).

- :func:`risk_profile_chart`: cumulative distribution of the plan's outcome (a step chart).
- :func:`tornado_chart`: swing of the problem's value as each input moves low to high.
- :func:`sensitivity_chart`: one-way sweep of one input with its break-even values.
- :func:`accuracy_chart`: a study source's claimed vs calibrated accuracy with intervals.
- :func:`outcomes_chart`: expected vs realised values after outcomes are recorded.
- :func:`calibration_chart`: observed frequency against forecast probability, by bin.

Inputs are the plain dicts of the result document and of ``valuation.sensitivity``
and ``valuation.reliability``; nothing here reads the database.
"""

from __future__ import annotations

import math
import sys
from collections.abc import Sequence

from reportlab.graphics.shapes import Circle, Drawing, Line, PolyLine, Rect, String

from decisions.drawings.style import (
    ACCENT,
    ACCENT_LIGHT,
    FONT,
    FONT_BOLD,
    GRID,
    INK,
    MUTED,
    NEGATIVE,
    WARM,
    amount,
    fit_text,
    text_width,
)

__all__ = [
    "risk_profile_chart",
    "tornado_chart",
    "sensitivity_chart",
    "accuracy_chart",
    "outcomes_chart",
    "calibration_chart",
    "nice_ticks",
]

SIZE = 7.0


#: The largest finite double (IEEE 754); axis ends are held within it.
_LARGEST = sys.float_info.max


def _clamp(v: float) -> float:
    return min(max(v, -_LARGEST), _LARGEST)


def nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    """Round tick values covering [lo, hi]: steps of 1, 2 or 5 times a power of ten
    (common practice for chart axes).

    Copes with any range a double can hold: the span is worked out from halves
    (``hi - lo`` itself may exceed a double), powers of ten are floats (an integer
    ``10 ** 300`` cannot be turned back into a float once multiplied up), ticks past
    the largest double are held at it, and a range too narrow for round steps (a few
    units in the last place) is given as its two ends. An infinite end is held at the
    largest double; NaN gives ``[0.0]``.
    """
    if math.isnan(lo) or math.isnan(hi):
        return [0.0]
    lo, hi = sorted((_clamp(float(lo)), _clamp(float(hi))))
    if hi == lo:
        pad = abs(lo) * 0.1 or 1.0
        lo, hi = _clamp(lo - pad), _clamp(hi + pad)
    count = max(count, 1)
    raw = min((hi / 2 - lo / 2) / count * 2, _LARGEST)
    if not raw > 1e-300:  # so narrow that 10 ** exponent would underflow
        return [lo, hi]
    exponent = math.floor(math.log10(raw))
    multiple = next(m for m in (1, 2, 5, 10) if m * 10.0 ** exponent >= raw)
    step = multiple * 10.0 ** exponent
    if max(abs(lo), abs(hi)) / step > 2.0 ** 52:
        return [lo, hi]  # a step below the doubles' resolution at lo and hi
    # integer multiples of the step, so no rounding error creeps in along the axis
    k0, k1 = math.floor(lo / step + 1e-9), math.ceil(hi / step - 1e-9)
    ticks = sorted({_clamp(_decimal(k * multiple, exponent)) for k in range(k0, k1 + 1)})
    return ticks if len(ticks) >= 2 else [lo, hi]


def _decimal(digits: int, exponent: int) -> float:
    """``digits * 10**exponent`` as the nearest double (0.3, not 0.30000000000000004;
    1e300, not 9.999999999999999e+299): Python reads a decimal literal correctly
    rounded, whereas a product with a power of ten rounds twice. Beyond the largest
    double it reads as inf (the caller holds it at the largest double)."""
    return float(f"{digits}e{exponent}")


def _fraction(v: float, scale: tuple[float, float]) -> float:
    """Where ``v`` lies along ``scale`` (0 at its low end, 1 at its high end).

    From halves: an axis from -1e308 to 1e308 spans more than a double holds.
    """
    lo, hi = scale
    return (float(v) / 2 - lo / 2) / ((hi / 2 - lo / 2) or 1.0)


class _Axes:
    """A plot area inside a drawing with linear x and y scales."""

    def __init__(self, d: Drawing, box: tuple[float, float, float, float],
                 xr: tuple[float, float], yr: tuple[float, float]):
        self.d, (self.x0, self.y0, self.x1, self.y1) = d, box
        self.xr, self.yr = xr, yr

    def x(self, v: float) -> float:
        return self.x0 + _fraction(v, self.xr) * (self.x1 - self.x0)

    def y(self, v: float) -> float:
        return self.y0 + _fraction(v, self.yr) * (self.y1 - self.y0)

    def x_axis(self, ticks, fmt, label: str = ""):
        for t in ticks:
            xx = self.x(t)
            self.d.add(Line(xx, self.y0, xx, self.y1, strokeColor=GRID, strokeWidth=0.5))
            self.d.add(String(xx, self.y0 - 9, fmt(t), fontName=FONT, fontSize=SIZE - 0.5,
                              fillColor=MUTED, textAnchor="middle"))
        self.d.add(Line(self.x0, self.y0, self.x1, self.y0, strokeColor=INK, strokeWidth=0.7))
        if label:
            self.d.add(String((self.x0 + self.x1) / 2, self.y0 - 19, label, fontName=FONT,
                              fontSize=SIZE, fillColor=INK, textAnchor="middle"))

    def y_axis(self, ticks, fmt, label: str = ""):
        for t in ticks:
            yy = self.y(t)
            self.d.add(Line(self.x0, yy, self.x1, yy, strokeColor=GRID, strokeWidth=0.5))
            self.d.add(String(self.x0 - 3, yy - 2.5, fmt(t), fontName=FONT, fontSize=SIZE - 0.5,
                              fillColor=MUTED, textAnchor="end"))
        self.d.add(Line(self.x0, self.y0, self.x0, self.y1, strokeColor=INK, strokeWidth=0.7))
        if label:
            self.d.add(String(self.x0, self.y1 + 5, label, fontName=FONT, fontSize=SIZE,
                              fillColor=INK, textAnchor="start"))


def _title(d: Drawing, text: str) -> None:
    if not text:
        return
    d.add(String(0, d.height - 10, fit_text(text, d.width, 8.5, FONT_BOLD), fontName=FONT_BOLD,
                 fontSize=8.5, fillColor=INK))


def _compact(v: float) -> str:
    """Axis labels: 1.2M, 350k, 0 (the table beside each chart gives exact figures)."""
    a = abs(v)
    if a >= 1e15:
        return f"{v:.3g}"
    if a >= 1e9:
        return f"{v / 1e9:.3g}bn"
    if a >= 1e6:
        return f"{v / 1e6:.3g}M"
    if a >= 1e3:
        return f"{v / 1e3:.3g}k"
    return f"{v:.3g}"


def _empty(width: float, height: float, title: str, message: str) -> Drawing:
    d = Drawing(width, height)
    _title(d, title)
    d.add(String(width / 2, height / 2, message, fontName=FONT, fontSize=SIZE + 1,
                 fillColor=MUTED, textAnchor="middle"))
    return d


def risk_profile_chart(risk_profile: dict, *, currency: str = "", width: float = 460,
                       height: float = 190, title: str = "Risk profile",
                       objective: str = "max") -> Drawing:
    """Step chart of P(outcome <= x) for the plan, with its expected value marked.

    ``risk_profile`` is the result document's ``risk_profile`` (``cumulative`` points
    ``{value, probability}`` in increasing value, and ``expected``).
    """
    points = [(float(p["value"]), float(p["probability"]))
              for p in risk_profile.get("cumulative") or []]
    if not points:
        return _empty(width, height, title, "no outcomes to show")
    lo, hi = points[0][0], points[-1][0]
    pad = (hi - lo) * 0.08 or (abs(lo) * 0.1 or 1.0)
    ticks = nice_ticks(lo - pad, hi + pad)
    d = Drawing(width, height)
    _title(d, title)
    ax = _Axes(d, (44, 30, width - 10, height - 26), (ticks[0], ticks[-1]), (0.0, 1.0))
    word = "cost" if objective == "min" else "outcome"
    ax.x_axis(ticks, _compact, f"{word} ({currency})" if currency else word)
    ax.y_axis([0, 0.25, 0.5, 0.75, 1.0], lambda t: f"{t:.2f}", f"P({word} <= x)")
    if ticks[0] < 0 < ticks[-1]:
        d.add(Line(ax.x(0), ax.y0, ax.x(0), ax.y1, strokeColor=MUTED, strokeWidth=0.6,
                   strokeDashArray=[1, 2]))
    coords = [ax.x(ticks[0]), ax.y(0)]
    prev = 0.0
    for value, p in points:
        coords += [ax.x(value), ax.y(prev), ax.x(value), ax.y(p)]
        prev = p
    coords += [ax.x(ticks[-1]), ax.y(prev)]
    d.add(PolyLine(coords, strokeColor=ACCENT, strokeWidth=1.6))
    for value, p in points:
        d.add(Circle(ax.x(value), ax.y(p), 1.8, fillColor=ACCENT, strokeColor=ACCENT))
    expected = risk_profile.get("expected")
    if expected is not None:
        xe = ax.x(float(expected))
        d.add(Line(xe, ax.y0, xe, ax.y1, strokeColor=WARM, strokeWidth=1, strokeDashArray=[3, 2]))
        text = f"expected {amount(expected)}"
        anchor = "start" if xe + 3 + text_width(text, SIZE) < ax.x1 else "end"
        d.add(String(xe + (3 if anchor == "start" else -3), ax.y1 - 8, text, fontName=FONT,
                     fontSize=SIZE, fillColor=WARM, textAnchor=anchor))
    return d


def tornado_chart(rows: Sequence[dict], *, base_value: float, currency: str = "",
                  width: float = 460, max_rows: int = 10,
                  title: str = "Tornado: value of the decision as each input moves") -> Drawing:
    """Horizontal bars from ``value_low`` to ``value_high`` of each input around the base.

    ``rows`` as ``valuation.sensitivity.tornado`` returns them (largest swing first).
    Bars left of the base line are drawn in the loss colour, right of it in the accent.
    """
    rows = list(rows)[:max_rows]
    if not rows:
        return _empty(width, 60, title, "no inputs to show")
    bar, gap = 12.0, 6.0
    height = 44 + len(rows) * (bar + gap)
    values = [float(base_value)] + [float(r[k]) for r in rows for k in ("value_low", "value_high")]
    lo, hi = min(values), max(values)
    pad = (hi - lo) * 0.05 or (abs(hi) * 0.1 or 1.0)
    ticks = nice_ticks(lo - pad, hi + pad)
    d = Drawing(width, height)
    _title(d, title)
    label_w = min(170.0, width * 0.36)
    ax = _Axes(d, (label_w + 6, 26, width - 10, height - 18), (ticks[0], ticks[-1]), (0, 1))
    ax.x_axis(ticks, _compact, f"value ({currency})" if currency else "value")
    base_x = ax.x(float(base_value))
    for i, row in enumerate(rows):
        top = ax.y1 - i * (bar + gap) - gap
        y = top - bar
        vl, vh = float(row["value_low"]), float(row["value_high"])
        d.add(String(label_w, y + 3.5, fit_text(row.get("label") or row.get("name", ""),
                                                label_w, SIZE), fontName=FONT, fontSize=SIZE,
                     fillColor=INK, textAnchor="end"))
        for v in (vl, vh):
            x0, x1 = sorted((base_x, ax.x(v)))
            colour = NEGATIVE if v < float(base_value) else ACCENT
            d.add(Rect(x0, y, max(x1 - x0, 0.5), bar, fillColor=colour, strokeColor=None))
        # the input value that produced each end of the bar
        for v, inp in ((vl, row.get("low")), (vh, row.get("high"))):
            if inp is None:
                continue
            money_input = row.get("kind") not in ("probability", "likelihood")
            text = _compact(float(inp)) if money_input else f"{float(inp):.4g}"
            xv = ax.x(v)
            left = xv < base_x or (xv == base_x and v == vl)
            d.add(String(xv + (-2 if left else 2), y + 3.5, text, fontName=FONT,
                         fontSize=SIZE - 1, fillColor=MUTED, textAnchor="end" if left else "start"))
    d.add(Line(base_x, ax.y0, base_x, ax.y1, strokeColor=INK, strokeWidth=1))
    return d


def sensitivity_chart(sweep: dict, *, currency: str = "", width: float = 460,
                      height: float = 170, title: str | None = None) -> Drawing:
    """Value of the problem over one input's range, break-even values marked.

    ``sweep`` as ``valuation.sensitivity.one_way`` returns it (``x``, ``value``,
    ``break_even`` [{value, from, to}], ``label``, ``base``).
    """
    title = title or f"One-way sensitivity: {sweep.get('label') or sweep.get('parameter', '')}"
    xs = [float(v) for v in sweep.get("x") or []]
    vs = [float(v) for v in sweep.get("value") or []]
    if len(xs) < 2 or len(xs) != len(vs):
        return _empty(width, height, title, "no sweep to show")
    xt = nice_ticks(min(xs), max(xs))
    yt = nice_ticks(min(vs), max(vs), 4)
    d = Drawing(width, height)
    _title(d, title)
    ax = _Axes(d, (44, 30, width - 10, height - 26), (xt[0], xt[-1]), (yt[0], yt[-1]))
    ax.x_axis(xt, lambda t: f"{t:.4g}", fit_text(sweep.get("label") or "", width - 60, SIZE))
    ax.y_axis(yt, _compact, f"value ({currency})" if currency else "value")
    coords = []
    for x, v in zip(xs, vs, strict=True):
        coords += [ax.x(x), ax.y(v)]
    d.add(PolyLine(coords, strokeColor=ACCENT, strokeWidth=1.5))
    base = sweep.get("base")
    if base is not None and xt[0] <= float(base) <= xt[-1]:
        xb = ax.x(float(base))
        d.add(Line(xb, ax.y0, xb, ax.y1, strokeColor=MUTED, strokeWidth=0.7,
                   strokeDashArray=[1, 2]))
        d.add(String(xb + 2, ax.y0 + 3, "base", fontName=FONT, fontSize=SIZE - 1, fillColor=MUTED))
    for k, be in enumerate(sweep.get("break_even") or []):
        xv = ax.x(float(be["value"]))
        d.add(Line(xv, ax.y0, xv, ax.y1, strokeColor=WARM, strokeWidth=1, strokeDashArray=[3, 2]))
        text = f"break-even {float(be['value']):.4g}"
        anchor = "start" if xv + 3 + text_width(text, SIZE - 0.5) < ax.x1 else "end"
        d.add(String(xv + (3 if anchor == "start" else -3), ax.y1 - 8 - 9 * (k % 3), text,
                     fontName=FONT, fontSize=SIZE - 0.5, fillColor=WARM, textAnchor=anchor))
    return d


def accuracy_chart(rows: Sequence[dict], *, width: float = 460,
                   title: str = "Claimed vs calibrated accuracy") -> Drawing:
    """One line per (true state, signal): the claim as a hollow mark, the calibrated
    posterior mean as a filled dot with its credible interval as a whisker.

    ``rows``: ``{"label", "claimed", "calibrated", "low", "high"}``, probabilities in [0, 1].
    """
    rows = list(rows)
    if not rows:
        return _empty(width, 60, title, "no accuracy figures to show")
    line = 13.0
    height = 58 + len(rows) * line
    d = Drawing(width, height)
    _title(d, title)
    label_w = min(170.0, width * 0.36)
    ax = _Axes(d, (label_w + 8, 26, width - 10, height - 30), (0.0, 1.0), (0, 1))
    ax.x_axis([0, 0.2, 0.4, 0.6, 0.8, 1.0], lambda t: f"{t:.1f}", "P(signal | true state)")
    for i, row in enumerate(rows):
        y = ax.y1 - (i + 0.5) * line
        d.add(String(label_w, y - 2.5, fit_text(row.get("label", ""), label_w, SIZE),
                     fontName=FONT, fontSize=SIZE, fillColor=INK, textAnchor="end"))
        if row.get("low") is not None and row.get("high") is not None:
            x0, x1 = ax.x(float(row["low"])), ax.x(float(row["high"]))
            d.add(Line(x0, y, x1, y, strokeColor=ACCENT, strokeWidth=1.2))
            for xx in (x0, x1):
                d.add(Line(xx, y - 3, xx, y + 3, strokeColor=ACCENT, strokeWidth=1.2))
        if row.get("calibrated") is not None:
            d.add(Circle(ax.x(float(row["calibrated"])), y, 2.6, fillColor=ACCENT,
                         strokeColor=ACCENT))
        if row.get("claimed") is not None:
            xc = ax.x(float(row["claimed"]))
            d.add(Rect(xc - 2.6, y - 2.6, 5.2, 5.2, fillColor=None, strokeColor=WARM,
                       strokeWidth=1.1))
    # key
    ky = height - 22
    d.add(Rect(label_w + 8, ky - 2.6, 5.2, 5.2, fillColor=None, strokeColor=WARM, strokeWidth=1.1))
    d.add(String(label_w + 17, ky - 2.5, "claimed", fontName=FONT, fontSize=SIZE, fillColor=INK))
    d.add(Circle(label_w + 68, ky, 2.6, fillColor=ACCENT, strokeColor=ACCENT))
    d.add(String(label_w + 74, ky - 2.5, "calibrated (posterior mean, credible interval)",
                 fontName=FONT, fontSize=SIZE, fillColor=INK))
    return d


def outcomes_chart(rows: Sequence[dict], *, currency: str = "", width: float = 460,
                   title: str = "Expected vs realised") -> Drawing:
    """Paired bars per recorded outcome: expected (light) and realised (dark).

    ``rows``: ``{"label", "expected", "realised"}``.
    """
    rows = [r for r in rows if r.get("expected") is not None or r.get("realised") is not None]
    if not rows:
        return _empty(width, 60, title, "no outcomes recorded")
    bar, gap = 7.0, 7.0
    height = 58 + len(rows) * (2 * bar + gap)
    values = [0.0] + [float(r[k]) for r in rows for k in ("expected", "realised")
                      if r.get(k) is not None]
    ticks = nice_ticks(min(values), max(values))
    d = Drawing(width, height)
    _title(d, title)
    label_w = min(150.0, width * 0.32)
    ax = _Axes(d, (label_w + 6, 26, width - 10, height - 30), (ticks[0], ticks[-1]), (0, 1))
    ax.x_axis(ticks, _compact, f"value ({currency})" if currency else "value")
    zero = ax.x(0.0)
    for i, row in enumerate(rows):
        top = ax.y1 - i * (2 * bar + gap) - gap / 2
        d.add(String(label_w, top - bar - 2.5, fit_text(row.get("label", ""), label_w, SIZE),
                     fontName=FONT, fontSize=SIZE, fillColor=INK, textAnchor="end"))
        for k, (key, colour) in enumerate((("expected", ACCENT_LIGHT), ("realised", ACCENT))):
            if row.get(key) is None:
                continue
            x0, x1 = sorted((zero, ax.x(float(row[key]))))
            d.add(Rect(x0, top - (k + 1) * bar, max(x1 - x0, 0.5), bar - 0.5, fillColor=colour,
                       strokeColor=ACCENT, strokeWidth=0.4))
    d.add(Line(zero, ax.y0, zero, ax.y1, strokeColor=INK, strokeWidth=0.8))
    ky = height - 22
    for k, (text, colour) in enumerate((("expected", ACCENT_LIGHT), ("realised", ACCENT))):
        x = label_w + 8 + k * 70
        d.add(Rect(x, ky - 3, 8, 6, fillColor=colour, strokeColor=ACCENT, strokeWidth=0.4))
        d.add(String(x + 11, ky - 2.5, text, fontName=FONT, fontSize=SIZE, fillColor=INK))
    return d


def calibration_chart(bins: Sequence[dict], *, width: float = 240, height: float = 240,
                      title: str = "Calibration") -> Drawing:
    """Observed frequency against mean forecast per bin; the diagonal is perfect calibration.

    ``bins`` as ``valuation.reliability.calibration_table`` returns them; a dot's area
    grows with its count, empty bins are skipped.
    """
    d = Drawing(width, height)
    _title(d, title)
    ax = _Axes(d, (34, 30, width - 10, height - 26), (0.0, 1.0), (0.0, 1.0))
    ticks = [0, 0.2, 0.4, 0.6, 0.8, 1.0]
    ax.x_axis(ticks, lambda t: f"{t:.1f}", "forecast probability")
    ax.y_axis(ticks, lambda t: f"{t:.1f}", "observed frequency")
    d.add(Line(ax.x(0), ax.y(0), ax.x(1), ax.y(1), strokeColor=MUTED, strokeWidth=0.7,
               strokeDashArray=[2, 2]))
    shown = [b for b in bins if b.get("count") and b.get("mean_forecast") is not None]
    top = max([int(b["count"]) for b in shown] or [1])
    for b in shown:
        radius = 1.5 + 3.5 * math.sqrt(int(b["count"]) / top)
        d.add(Circle(ax.x(float(b["mean_forecast"])), ax.y(float(b["observed_frequency"])),
                     radius, fillColor=ACCENT, strokeColor=INK, strokeWidth=0.5))
    return d

