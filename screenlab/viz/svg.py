"""Static SVG plots for documents that must open offline and print (the HTML report).

Plain SVG text: no script, no external font or stylesheet, so the figure is part of the file and
prints as vectors. Two figures, matching the app's Plotly ones in what they show:

* :func:`forest_svg` estimate and interval per candidate, best at the top (linear or log axis);
* :func:`arrhenius_svg` ln TOF against 1000/T per catalyst: measured points with their intervals,
  the fitted line and its confidence band.

Colours are the Okabe-Ito set (Okabe & Ito 2008, "Color Universal Design"; no pair differs only
by red versus green) and every series also has its own marker shape, so the plot reads in grey
print. Nothing here estimates anything; values come in already computed.
"""
from __future__ import annotations

import math
import zlib
from html import escape

import numpy as np

#: Okabe-Ito colours; orange is kept for the benchmark (as in the app)
PALETTE = ("#0072B2", "#009E73", "#CC79A7", "#D55E00", "#56B4E9", "#000000", "#999999")
BENCHMARK_COLOUR = "#E69F00"
MARKERS = ("circle", "square", "diamond", "triangle", "triangle-down", "cross")
FONT = "font-family='Helvetica, Arial, sans-serif'"


def _f(v: float) -> str:
    return f"{v:.1f}"


def nice_step(span: float, target: int = 7) -> float:
    """A tick step of 1, 2 or 5 x 10^k giving about ``target`` ticks (at most that many intervals)
    over ``span`` (> 0); the one step rule of the report's and the app's axes."""
    raw = float(span) / max(target, 1)
    mag = 10.0 ** math.floor(math.log10(raw))
    return next(m * mag for m in (1.0, 2.0, 5.0, 10.0) if m * mag >= raw * (1 - 1e-12))


def nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """About ``n`` round ticks (1, 2 or 5 x 10^k steps, :func:`nice_step`) covering [lo, hi]."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi <= lo:
        hi = lo + (abs(lo) * 0.1 or 1.0)
    step = nice_step(hi - lo, n)
    start = math.ceil(lo / step - 1e-9) * step
    ticks, t = [], start
    while t <= hi + 1e-9 * step:
        ticks.append(round(t, 12))
        t += step
    return ticks


def log_ticks(lo: float, hi: float) -> list[float]:
    """Ticks of a log axis over [lo, hi] (> 0): decades, with 2 and 5 when fewer than 3 decades."""
    if not (lo > 0 and hi > 0 and math.isfinite(lo) and math.isfinite(hi)):
        return []
    a, b = math.floor(math.log10(lo)), math.ceil(math.log10(hi))
    mult = (1,) if b - a > 3 else (1, 2, 5)
    out = [m * 10.0 ** e for e in range(a, b + 1) for m in mult if lo * (1 - 1e-9) <= m * 10.0 ** e <= hi * (1 + 1e-9)]
    if len(out) < 3:  # less than a factor of about 5: round linear steps read better
        out = [t for t in nice_ticks(lo, hi, 5) if t > 0]
    return out


class _Axis:
    """Maps data values to pixels (linear, or log10 when ``log``)."""

    def __init__(self, lo: float, hi: float, p0: float, p1: float, log: bool = False):
        self.log = log
        self.lo, self.hi = (math.log10(lo), math.log10(hi)) if log else (lo, hi)
        if self.hi <= self.lo:
            self.hi = self.lo + 1.0
        self.p0, self.p1 = p0, p1

    def __call__(self, v: float) -> float:
        x = math.log10(v) if self.log else v
        return self.p0 + (x - self.lo) / (self.hi - self.lo) * (self.p1 - self.p0)


def _label(v: float) -> str:
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 1e5 or a < 1e-3:
        return f"{v:.0e}"
    return f"{v:.4g}"


def _marker(shape: str, x: float, y: float, r: float, colour: str, filled: bool = True) -> str:
    fill = colour if filled else "#ffffff"
    common = f"fill='{fill}' stroke='{colour if not filled else '#333333'}' stroke-width='1'"
    if shape == "square":
        return f"<rect x='{_f(x - r)}' y='{_f(y - r)}' width='{_f(2 * r)}' height='{_f(2 * r)}' {common}/>"
    if shape == "diamond":
        pts = f"{_f(x)},{_f(y - r * 1.3)} {_f(x + r * 1.3)},{_f(y)} {_f(x)},{_f(y + r * 1.3)} {_f(x - r * 1.3)},{_f(y)}"
        return f"<polygon points='{pts}' {common}/>"
    if shape in ("triangle", "triangle-down"):
        s = -1 if shape == "triangle" else 1
        pts = f"{_f(x)},{_f(y + s * r * 1.3)} {_f(x + r * 1.2)},{_f(y - s * r * 0.8)} {_f(x - r * 1.2)},{_f(y - s * r * 0.8)}"
        return f"<polygon points='{pts}' {common}/>"
    if shape == "cross":
        w = r * 0.45
        d = (f"M{_f(x - w)},{_f(y - r)}h{_f(2 * w)}v{_f(r - w)}h{_f(r - w)}v{_f(2 * w)}h{_f(-(r - w))}v{_f(r - w)}"
             f"h{_f(-2 * w)}v{_f(-(r - w))}h{_f(-(r - w))}v{_f(-2 * w)}h{_f(r - w)}z")
        return f"<path d='{d}' {common}/>"
    if shape == "star":
        pts = []
        for i in range(10):
            ang = math.pi / 2 + i * math.pi / 5
            rr = r * 1.5 if i % 2 == 0 else r * 0.65
            pts.append(f"{_f(x + rr * math.cos(ang))},{_f(y - rr * math.sin(ang))}")
        return f"<polygon points='{' '.join(pts)}' {common}/>"
    return f"<circle cx='{_f(x)}' cy='{_f(y)}' r='{_f(r)}' {common}/>"


def _svg(width: int, height: int, body: list[str], title: str) -> str:
    # inline in HTML: the parser puts <svg> in the SVG namespace itself (no xmlns needed)
    return (f"<svg viewBox='0 0 {width} {height}' width='100%' "
            f"style='max-width:{width}px' role='img' aria-label='{escape(title, quote=True)}' {FONT} font-size='12'>"
            f"<title>{escape(title)}</title>" + "".join(body) + "</svg>")


def forest_svg(labels, estimate, ci_low, ci_high, *, x_label: str, log_x: bool = False, highlight=(),
               benchmark=(), title: str = "", width: int = 760) -> str:
    """Estimate (diamond) and interval (bar) per row, first row at the top.

    ``highlight`` rows (e.g. the chosen candidates) are drawn filled and bold, ``benchmark`` rows
    in orange; rows whose estimate is missing are left out. Bars whose end is missing run to the
    axis edge with an arrow (an open interval)."""
    labels = [str(s) for s in labels]
    est = np.asarray(estimate, float)
    lo, hi = np.asarray(ci_low, float), np.asarray(ci_high, float)
    keep = np.isfinite(est) & ((est > 0) if log_x else True)
    labels = [l for l, k in zip(labels, keep) if k]
    est, lo, hi = est[keep], lo[keep], hi[keep]
    hl, bm = set(map(str, highlight)), set(map(str, benchmark))
    row_h, top, bottom = 20, 34 if title else 14, 46
    left = 14 + 7 * max([len(s) for s in labels] + [6])
    right = 24
    height = top + bottom + row_h * max(len(labels), 1)
    body: list[str] = []
    if title:
        body.append(f"<text x='{left}' y='18' font-size='14' font-weight='bold'>{escape(title)}</text>")
    vals = np.concatenate([est, lo[np.isfinite(lo)], hi[np.isfinite(hi)]])
    if log_x:
        vals = vals[vals > 0]
    if not len(labels) or not vals.size:
        body.append(f"<text x='{left}' y='{top + 14}'>no estimate to show</text>")
        return _svg(width, height, body, title or x_label)
    vmin, vmax = float(vals.min()), float(vals.max())
    if log_x:
        pad = (vmax / vmin) ** 0.05 if vmax > vmin else 2.0
        vmin, vmax = vmin / pad, vmax * pad
        ticks = log_ticks(vmin, vmax)
    else:
        span = (vmax - vmin) or abs(vmax) or 1.0
        vmin, vmax = vmin - 0.05 * span, vmax + 0.05 * span
        ticks = nice_ticks(vmin, vmax)
    ax = _Axis(vmin, vmax, left, width - right, log=log_x)
    y_end = top + row_h * len(labels)
    for t in ticks:  # a handful of ticks
        x = ax(t)
        body.append(f"<line x1='{_f(x)}' y1='{top}' x2='{_f(x)}' y2='{y_end}' stroke='#dddddd'/>")
        body.append(f"<text x='{_f(x)}' y='{y_end + 16}' text-anchor='middle'>{escape(_label(t))}</text>")
    body.append(f"<line x1='{left}' y1='{y_end}' x2='{width - right}' y2='{y_end}' stroke='#333333'/>")
    body.append(f"<text x='{_f((left + width - right) / 2)}' y='{y_end + 36}' text-anchor='middle'>"
                f"{escape(x_label)}</text>")
    for i, name in enumerate(labels):  # one row per candidate shown (a few dozen at most)
        y = top + row_h * (i + 0.5)
        colour = BENCHMARK_COLOUR if name in bm else PALETTE[0]
        weight = " font-weight='bold'" if name in hl else ""
        body.append(f"<text x='{left - 8}' y='{_f(y + 4)}' text-anchor='end'{weight}>{escape(name)}</text>")
        a = ax(lo[i]) if np.isfinite(lo[i]) and (lo[i] > 0 or not log_x) else left
        b = ax(hi[i]) if np.isfinite(hi[i]) else width - right
        a, b = max(left, min(a, width - right)), max(left, min(b, width - right))
        if np.isfinite(lo[i]) or np.isfinite(hi[i]):
            body.append(f"<line x1='{_f(a)}' y1='{_f(y)}' x2='{_f(b)}' y2='{_f(y)}' stroke='{colour}' "
                        f"stroke-width='{2.5 if name in hl else 1.5}'/>")
            for end, ok in ((a, np.isfinite(lo[i])), (b, np.isfinite(hi[i]))):
                if ok:
                    body.append(f"<line x1='{_f(end)}' y1='{_f(y - 4)}' x2='{_f(end)}' y2='{_f(y + 4)}' "
                                f"stroke='{colour}'/>")
        body.append(_marker("star" if name in bm else "diamond", ax(est[i]), y, 4.5, colour, filled=name in hl or name in bm))
    return _svg(width, height, body, title or x_label)


def arrhenius_svg(series: list[dict], *, confidence: float = 0.95, title: str = "", width: int = 760,
                  height: int = 440) -> str:
    """ln(TOF / h-1) against 1000/T (T = t + 273.15 K), one series per catalyst.

    Each series is a dict with ``name``, ``benchmark`` (bool), ``points`` (``temperature_c,
    tof_per_h, tof_ci_low, tof_ci_high`` arrays: measured TOFs and intervals) and ``line``
    (``temperature_c, tof_per_h, tof_ci_low, tof_ci_high``: the fit and its band on a grid).
    Non-positive values have no logarithm and are left out."""
    def inv_t(t):
        return 1000.0 / (np.asarray(t, float) + 273.15)

    def ln(v):
        v = np.asarray(v, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(v > 0, np.log(np.where(v > 0, v, 1.0)), np.nan)

    xs, ys = [], []
    for s in series:  # a few catalysts
        for part in ("points", "line"):
            d = s.get(part) or {}
            if len(d.get("temperature_c", ())):
                xs.append(inv_t(d["temperature_c"]))
                for k in ("tof_per_h", "tof_ci_low", "tof_ci_high"):
                    if k in d:
                        ys.append(ln(d[k]))
    x_all = np.concatenate(xs) if xs else np.array([])
    y_all = np.concatenate(ys) if ys else np.array([])
    x_all, y_all = x_all[np.isfinite(x_all)], y_all[np.isfinite(y_all)]
    left, right, top, bottom = 64, 180, 34 if title else 14, 52
    body: list[str] = []
    if title:
        body.append(f"<text x='{left}' y='18' font-size='14' font-weight='bold'>{escape(title)}</text>")
    if not x_all.size or not y_all.size:
        body.append(f"<text x='{left}' y='{top + 20}'>no temperature series to show</text>")
        return _svg(width, height, body, title or "Arrhenius plot")
    x0, x1 = float(x_all.min()), float(x_all.max())
    y0, y1 = float(y_all.min()), float(y_all.max())
    px, py = (x1 - x0) * 0.06 or 0.02, (y1 - y0) * 0.08 or 0.5
    xa = _Axis(x0 - px, x1 + px, left, width - right)
    ya = _Axis(y0 - py, y1 + py, height - bottom, top)
    for t in nice_ticks(x0 - px, x1 + px, 6):
        x = xa(t)
        body.append(f"<line x1='{_f(x)}' y1='{top}' x2='{_f(x)}' y2='{height - bottom}' stroke='#e5e5e5'/>")
        body.append(f"<text x='{_f(x)}' y='{height - bottom + 16}' text-anchor='middle'>{escape(_label(t))}</text>")
    for t in nice_ticks(y0 - py, y1 + py, 6):
        y = ya(t)
        body.append(f"<line x1='{left}' y1='{_f(y)}' x2='{width - right}' y2='{_f(y)}' stroke='#e5e5e5'/>")
        body.append(f"<text x='{left - 6}' y='{_f(y + 4)}' text-anchor='end'>{escape(_label(t))}</text>")
    body.append(f"<rect x='{left}' y='{top}' width='{width - right - left}' height='{height - bottom - top}' "
                f"fill='none' stroke='#333333'/>")
    body.append(f"<text x='{_f((left + width - right) / 2)}' y='{height - 12}' text-anchor='middle'>"
                f"1000/T / K⁻¹</text>")
    body.append(f"<text transform='translate(16,{_f((top + height - bottom) / 2)}) rotate(-90)' "
                f"text-anchor='middle'>ln(TOF / h⁻¹)</text>")
    # a clip id of its own per figure (ids are document-wide when several SVGs sit in one page)
    cid = f"plotarea-{zlib.crc32(repr((title, [s.get('name') for s in series])).encode('utf-8')):08x}"
    body.append(f"<clipPath id='{cid}'><rect x='{left}' y='{top}' width='{width - right - left}' "
                f"height='{height - bottom - top}'/></clipPath>")
    legend_y = top + 8
    k = 0
    for s in series:  # a few catalysts
        bench = bool(s.get("benchmark"))
        colour = BENCHMARK_COLOUR if bench else PALETTE[k % len(PALETTE)]
        shape = "star" if bench else MARKERS[k % len(MARKERS)]
        if not bench:
            k += 1
        line = s.get("line") or {}
        if len(line.get("temperature_c", ())):
            order = np.argsort(inv_t(line["temperature_c"]))
            x = inv_t(line["temperature_c"])[order]
            yl, yh, yc = (ln(line[c])[order] for c in ("tof_ci_low", "tof_ci_high", "tof_per_h"))
            band = np.isfinite(yl) & np.isfinite(yh)
            if band.sum() >= 2:
                pts = [f"{_f(xa(a))},{_f(ya(b))}" for a, b in zip(x[band], yh[band])]
                pts += [f"{_f(xa(a))},{_f(ya(b))}" for a, b in zip(x[band][::-1], yl[band][::-1])]
                body.append(f"<polygon points='{' '.join(pts)}' fill='{colour}' fill-opacity='0.15' stroke='none' "
                            f"clip-path='url(#{cid})'/>")
            ok = np.isfinite(yc)
            if ok.sum() >= 2:
                d = " ".join(f"{'M' if i == 0 else 'L'}{_f(xa(a))},{_f(ya(b))}"
                             for i, (a, b) in enumerate(zip(x[ok], yc[ok])))
                dash = "" if k % 2 else " stroke-dasharray='6 3'"
                body.append(f"<path d='{d}' fill='none' stroke='{colour}' stroke-width='1.8'{dash} "
                            f"clip-path='url(#{cid})'/>")
        pts = s.get("points") or {}
        if len(pts.get("temperature_c", ())):
            x = inv_t(pts["temperature_c"])
            yc = ln(pts["tof_per_h"])
            yl = ln(pts.get("tof_ci_low", np.full(len(x), np.nan)))
            yh = ln(pts.get("tof_ci_high", np.full(len(x), np.nan)))
            for a, c, l, h in zip(x, yc, yl, yh):  # a few temperatures
                if not np.isfinite(c):
                    continue
                if np.isfinite(h):
                    lo_px = ya(l) if np.isfinite(l) else height - bottom
                    body.append(f"<line x1='{_f(xa(a))}' y1='{_f(lo_px)}' x2='{_f(xa(a))}' y2='{_f(ya(h))}' "
                                f"stroke='{colour}' stroke-width='1.2' clip-path='url(#{cid})'/>")
                body.append(_marker(shape, xa(a), ya(c), 4.5, colour))
        lx = width - right + 14
        body.append(_marker(shape, lx, legend_y, 4.5, colour))
        body.append(f"<text x='{lx + 12}' y='{legend_y + 4}'>{escape(str(s.get('name', '')))}"
                    f"{' (benchmark)' if bench else ''}</text>")
        legend_y += 18
    body.append(f"<text x='{width - right + 8}' y='{legend_y + 10}' font-size='10' fill='#555555'>points: measured, "
                f"{confidence * 100:g} %</text>")
    body.append(f"<text x='{width - right + 8}' y='{legend_y + 24}' font-size='10' fill='#555555'>lines: fit and "
                f"band</text>")
    return _svg(width, height, body, title or "Arrhenius plot")


__all__ = ["arrhenius_svg", "forest_svg", "log_ticks", "nice_ticks"]
