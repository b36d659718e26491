"""The report's SVG charts: bars with intervals, a forest plot, metric-vs-k lines and the
distribution of per-query differences. Coordinates are rounded so the output is stable byte for
byte."""

from __future__ import annotations

import html
import math
from collections.abc import Sequence

BASE, TUNED = "base", "tuned"


COLOURS = {BASE: "#7b8794", TUNED: "#1f6fb2", "win": "#2f855a", "loss": "#c53030"}


E = html.escape


def _f(x: float) -> str:
    return f"{x:.1f}"


def _svg(width: int, height: int, title: str, body: list[str]) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}"><title>{E(title)}</title>' + "".join(body) + "</svg>"
    )


def nice_ticks(lo: float, hi: float, most: int = 6) -> list[float]:
    """Round tick values between ``lo`` and ``hi``: multiples of 1, 2, 2.5 or 5 times a power
    of ten, at most ``most`` of them (common charting practice)."""
    if hi <= lo:
        return [lo]
    raw = (hi - lo) / (most - 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    n = int(math.floor((hi - first) / step + 1e-9)) + 1
    return [round(first + i * step, 10) for i in range(n)]


def _axis_y(x0: float, y0: float, h: float, lo: float, hi: float, w: float) -> list[str]:
    out = []
    ticks = nice_ticks(lo, hi)
    step = ticks[1] - ticks[0] if len(ticks) > 1 else 1.0
    digits = max(0, -math.floor(math.log10(step) + 1e-9)) + (1 if step * 10 ** max(
        0, -math.floor(math.log10(step) + 1e-9)) % 1 else 0)  # fmt: skip
    for v in ticks:
        y = y0 + h - h * (v - lo) / (hi - lo)
        out.append(
            f'<line x1="{_f(x0)}" y1="{_f(y)}" x2="{_f(x0 + w)}" y2="{_f(y)}" '
            'stroke="#e2e8f0"/>'
            f'<text x="{_f(x0 - 6)}" y="{_f(y + 4)}" text-anchor="end" class="tick">'
            f"{v:.{digits}f}</text>"
        )
    return out


def _legend(x: float, y: float, items: list[tuple[str, str]]) -> list[str]:
    out = []
    for i, (label, colour) in enumerate(items):
        xx = x + i * 90
        out.append(
            f'<rect x="{_f(xx)}" y="{_f(y - 9)}" width="10" height="10" fill="{colour}"/>'
            f'<text x="{_f(xx + 14)}" y="{_f(y)}" class="tick">{E(label)}</text>'
        )
    return out


def bars_svg(groups: list[tuple[str, list[tuple[str, float, float, float]]]], title: str) -> str:
    """Grouped bars (label, [(model, mean, low, high)]) with interval whiskers. The axis starts
    at the tenth below the lowest interval (not at 0), so differences of a few hundredths show;
    its first tick says where it starts."""
    n = sum(len(g) for _, g in groups)
    gap = max(40, 7 * max([len(label) for label, _ in groups] + [0]) - 58)
    width = max(360, int(70 + n * 32 + len(groups) * gap))
    height, x0, y0, h = 272, 50.0, 24.0, 190.0
    lows = [min(mean, lo) for _, items in groups for _, mean, lo, _ in items]
    floor = max(0.0, min(0.9, math.floor(min(lows, default=0.0) * 10) / 10))
    body = _axis_y(x0, y0, h, floor, 1.0, width - x0 - 10)

    def level(v: float) -> float:
        return (max(floor, min(1.0, v)) - floor) / (1.0 - floor)

    x = x0 + 12
    for label, items in groups:
        start = x
        for model, mean, lo, hi in items:
            top = y0 + h * (1 - level(mean))
            colour = COLOURS.get(model, "#4a5568")
            body.append(
                f'<rect x="{_f(x)}" y="{_f(top)}" width="26" height="{_f(y0 + h - top)}" '
                f'fill="{colour}"><title>{E(model)} {E(label)}: {mean:.4f} '
                f"[{lo:.4f}, {hi:.4f}]</title></rect>"
            )
            ylo, yhi = y0 + h * (1 - level(lo)), y0 + h * (1 - level(hi))
            cx = x + 13
            body.append(
                f'<path d="M{_f(cx)} {_f(ylo)}V{_f(yhi)}M{_f(cx - 5)} {_f(ylo)}H{_f(cx + 5)}'
                f'M{_f(cx - 5)} {_f(yhi)}H{_f(cx + 5)}" stroke="#1a202c" stroke-width="1.2"/>'
            )
            x += 32
        name, _, count = label.partition("\n")
        cx = (start + x - 6) / 2
        body.append(
            f'<text x="{_f(cx)}" y="{_f(y0 + h + 16)}" text-anchor="middle" class="lab">'
            f'{E(name)}</text><text x="{_f(cx)}" y="{_f(y0 + h + 30)}" text-anchor="middle" '
            f'class="tick">{E(count)}</text>'
        )
        x += gap
    body += _legend(x0, 14, [(m, COLOURS[m]) for m in (BASE, TUNED)])
    return _svg(width, height, title, body)


def forest_svg(
    rows: Sequence[tuple[str, float, float, float, float]], title: str, alpha: float = 0.05
) -> str:
    """Differences (label, diff, low, high, p) as points with intervals around a zero line:
    green or red only where the interval excludes zero and the test agrees (p <= alpha), so a
    gain the randomization test does not confirm is drawn in grey."""
    width, row_h, x0, w = 560, 26, 180.0, 360.0
    height = 40 + row_h * len(rows)
    span = max([0.02] + [max(abs(lo), abs(hi), abs(d)) for _, d, lo, hi, _ in rows]) * 1.15

    def sx(v: float) -> float:
        return x0 + w * (v + span) / (2 * span)

    body = [
        f'<line x1="{_f(sx(0))}" y1="10" x2="{_f(sx(0))}" y2="{height - 22}" stroke="#a0aec0" '
        'stroke-dasharray="4 3"/>',
        f'<text x="{_f(sx(-span))}" y="{height - 6}" class="tick">{-span:+.3f}</text>',
        f'<text x="{_f(sx(0))}" y="{height - 6}" text-anchor="middle" class="tick">0</text>',
        f'<text x="{_f(sx(span))}" y="{height - 6}" text-anchor="end" class="tick">'
        f"{span:+.3f}</text>",
    ]
    for i, (label, d, lo, hi, p) in enumerate(rows):
        y = 22 + i * row_h
        sure = p <= alpha
        colour = COLOURS["win"] if lo > 0 and sure else COLOURS["loss"] if hi < 0 and sure \
            else "#4a5568"  # fmt: skip
        body.append(
            f'<text x="{_f(x0 - 8)}" y="{_f(y + 4)}" text-anchor="end" class="lab">{E(label)}'
            f'</text><line x1="{_f(sx(lo))}" y1="{_f(y)}" x2="{_f(sx(hi))}" y2="{_f(y)}" '
            f'stroke="{colour}" stroke-width="2"/><circle cx="{_f(sx(d))}" cy="{_f(y)}" r="4" '
            f'fill="{colour}"><title>{E(label)}: {d:+.4f} [{lo:+.4f}, {hi:+.4f}]</title></circle>'
        )
    return _svg(width, height, title, body)


def lines_svg(
    series: list[tuple[str, str, list[float], list[float]]],
    title: str,
    xlabel: str,
    *,
    y_range: tuple[float, float] | None = None,
    dashed: Sequence[str] = (),
) -> str:
    """Line chart of (name, colour, xs, ys) series."""
    width, x0, y0, w, h = 420, 50.0, 12.0, 350.0, 170.0
    height = int(y0 + h + 42 + 16 * ((len(series) + 1) // 2))
    xs_all = [x for _, _, xs, _ in series for x in xs]
    ys_all = [y for _, _, _, ys in series for y in ys]
    if not xs_all:
        return _svg(width, height, title, ['<text x="20" y="40">no data</text>'])
    xlo, xhi = min(xs_all), max(xs_all)
    ylo, yhi = y_range or (min(ys_all), max(ys_all))
    if yhi - ylo < 1e-9:
        ylo, yhi = ylo - 0.5, yhi + 0.5
    if xhi - xlo < 1e-9:
        xlo, xhi = xlo - 1, xhi + 1

    def px(x: float) -> float:
        return x0 + w * (x - xlo) / (xhi - xlo)

    def py(y: float) -> float:
        return y0 + h * (1 - (y - ylo) / (yhi - ylo))

    body = _axis_y(x0, y0, h, ylo, yhi, w)
    for v in sorted({xlo, xhi, *(xs_all if len(set(xs_all)) <= 12 else [])}):
        body.append(
            f'<text x="{_f(px(v))}" y="{_f(y0 + h + 14)}" text-anchor="middle" class="tick">'
            f"{v:g}</text>"
        )
    body.append(
        f'<text x="{_f(x0 + w)}" y="{_f(y0 + h + 28)}" text-anchor="end" class="lab">'
        f"{E(xlabel)}</text>"
    )
    for i, (name, colour, xs, ys) in enumerate(series):
        pts = " ".join(f"{_f(px(x))},{_f(py(y))}" for x, y in zip(xs, ys, strict=True))
        dash = ' stroke-dasharray="5 3"' if name in dashed else ""
        body.append(
            f'<polyline points="{pts}" fill="none" stroke="{colour}" stroke-width="2"{dash}>'
            f"<title>{E(name)}</title></polyline>"
        )
        lx, ly = x0 + 160 * (i % 2), y0 + h + 44 + 16 * (i // 2)
        body.append(
            f'<line x1="{_f(lx)}" y1="{_f(ly - 4)}" x2="{_f(lx + 24)}" y2="{_f(ly - 4)}" '
            f'stroke="{colour}" stroke-width="2"{dash}/><text x="{_f(lx + 30)}" y="{_f(ly)}" '
            f'class="tick">{E(name)}</text>'
        )
    return _svg(width, height, title, body)


def diffs_svg(diffs: list[float], title: str) -> str:
    """Every query's tuned-minus-base difference, sorted: losses left, wins right."""
    width, height, x0, w, mid, h = 520, 200, 40.0, 470.0, 100.0, 80.0
    n = max(1, len(diffs))
    bw = w / n
    body = [
        f'<line x1="{_f(x0)}" y1="{_f(mid)}" x2="{_f(x0 + w)}" y2="{_f(mid)}" stroke="#a0aec0"/>',
        f'<text x="{_f(x0 - 4)}" y="{_f(mid - h + 4)}" text-anchor="end" class="tick">+1</text>',
        f'<text x="{_f(x0 - 4)}" y="{_f(mid + h + 4)}" text-anchor="end" class="tick">-1</text>',
    ]
    for i, d in enumerate(diffs):
        if d == 0:
            continue
        colour = COLOURS["win"] if d > 0 else COLOURS["loss"]
        hh = h * min(1.0, abs(d))
        y = mid - hh if d > 0 else mid
        body.append(
            f'<rect x="{_f(x0 + i * bw)}" y="{_f(y)}" width="{max(bw - 0.4, 0.6):.2f}" '
            f'height="{_f(max(hh, 0.8))}" fill="{colour}"/>'
        )
    losses = sum(d < 0 for d in diffs)
    wins = sum(d > 0 for d in diffs)
    body.append(
        f'<text x="{_f(x0)}" y="{height - 6}" class="tick">{losses} worse, '
        f"{len(diffs) - wins - losses} tied, {wins} better (of {len(diffs)} queries)</text>"
    )
    return _svg(width, height, title, body)
