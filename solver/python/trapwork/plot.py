"""matplotlib drawings of trapwork's figures: the pictures the command line draws with PLplot.

The command line writes each figure with PLplot (solver/scenario/plot.cpp); the module gives
the same figure data as plain dicts (``result.figures``: stem -> dict with the fields of the
C++ figure struct by the same names, numpy arrays for vectors, ``None`` for absent optional
values, enums as lower-case strings, and ``"kind"``: ``"levels"``, ``"work"``, ``"sweep"``,
``"comparison"`` or ``"stack"``). :func:`plot` draws them with matplotlib, with the same panels, ranges and
markers, so that a notebook shows them inline and the user can restyle the returned Figure.

matplotlib is imported when a figure is drawn, not when ``trapwork`` is imported.
"""

import math
import os
import sys

import numpy as np

__all__ = ["plot", "plplot_text", "figure_kinds"]

figure_kinds = ("levels", "work", "sweep", "comparison", "stack")

# Colours of plot.cpp's colour map (role -> RGB 0..255), and its fill transparencies.
_COLOURS = {
    "ink": (0, 0, 0),
    "blue": (31, 100, 180),
    "orange": (230, 120, 20),
    "green": (44, 150, 60),
    "red": (200, 30, 40),
    "purple": (120, 60, 160),
    "grey": (110, 110, 110),
}
_FILL_ALPHA = {"blue": 0.25, "orange": 0.3, "green": 0.25, "purple": 0.25}
_POINT_ROLES = ("blue", "green", "purple")    # sweep points, in turn
_CURVE_ROLES = ("orange", "red", "grey")      # sweep curves, in turn

_STYLE_KEYS = {"figsize", "dpi", "title", "legend", "colors"}

# ---- PLplot text -> matplotlib text ---------------------------------------------------------

# PLplot's Greek escapes "#g<letter>" (the Hershey/Unicode map of the PLplot manual, section
# "Escape sequences in text"; the letters follow the Latin transliteration there).
_GREEK_LOWER = "αβγδεζηθικλμνξοπρστυφχψω"
_GREEK_KEYS = "abgdezyhiklmncoprstufxqw"
_GREEK = {k: g for k, g in zip(_GREEK_KEYS, _GREEK_LOWER)}
_GREEK.update({k.upper(): g.upper() for k, g in zip(_GREEK_KEYS, _GREEK_LOWER)})

_MATH_SPECIAL = {"\\": r"\backslash ", "{": r"\{", "}": r"\}", "_": r"\_", "^": r"\^{}",
                 "$": r"\$", "%": r"\%", "#": r"\#", "&": r"\&", " ": r"\ ", "~": r"\sim "}


def plplot_text(text):
    """PLplot text (as the C++ figures carry it) as matplotlib text.

    '#g<letter>' becomes a Greek letter ('#gD' -> 'Δ', '#gb' -> 'β', '#gw' -> 'ω'),
    '#u' / '#d' raise / lower by one level (drawn as mathtext super- and subscripts:
    'E#dn#u' -> 'E$_{\\mathregular{n}}$'), '##' is a literal '#'; a '$' of the text itself is
    escaped so that matplotlib does not start math mode.
    """
    if text is None:
        return ""
    text = str(text)
    pieces = []        # (level, characters)
    level = 0
    i = 0
    current = []

    def flush():
        if current:
            pieces.append((level, "".join(current)))
            current.clear()

    while i < len(text):
        c = text[i]
        if c == "#" and i + 1 < len(text):
            e = text[i + 1]
            if e == "g" and i + 2 < len(text):
                current.append(_GREEK.get(text[i + 2], text[i + 2]))
                i += 3
                continue
            if e in "ud":
                flush()
                level += 1 if e == "u" else -1
                i += 2
                continue
            if e == "#":
                current.append("#")
                i += 2
                continue
        current.append(c)
        i += 1
    flush()

    out = []
    for lvl, chars in pieces:
        if lvl == 0:
            out.append(chars.replace("$", r"\$"))
            continue
        body = "".join(_MATH_SPECIAL.get(ch, ch) for ch in chars)
        mark = "^" if lvl > 0 else "_"
        out.append("$" + (mark + "{") * abs(lvl) + r"\mathregular{" + body + "}" + "}" * abs(lvl) + "$")
    return "".join(out)


# ---- figure data ----------------------------------------------------------------------------

def _array(value):
    if value is None:
        return np.zeros(0)
    return np.asarray(value, dtype=float).ravel()


def _kind(figure):
    kind = figure.get("kind")
    if kind is None:  # a dict without "kind": recognise the struct by a field only it has
        for key, name in (("stack", "stack"), ("panels", "levels"), ("result", "work"), ("edges", "comparison"),
                          ("points", "sweep"), ("curves", "sweep")):
            if key in figure:
                return name
        raise ValueError("plot: not a trapwork figure (no 'kind' and no known fields): keys "
                         + ", ".join(sorted(map(str, figure))))
    kind = str(kind).lower()
    if kind not in figure_kinds:
        raise ValueError(f"plot: unknown figure kind '{kind}' (known: {', '.join(figure_kinds)})")
    return kind


def _is_figure(obj):
    return isinstance(obj, dict) and ("kind" in obj or "panels" in obj or "result" in obj
                                      or "edges" in obj or "stack" in obj)


def _bad(figure, what):
    raise ValueError(f"plot_{figure}: {what}")


def _same_size(figure, what, a, b):
    if len(a) != len(b):
        _bad(figure, f"{what}: sizes differ ({len(a)} and {len(b)})")


def _padded(lo, hi, fraction):
    """plot.cpp's Range::padded: widened by fraction of the width on each side."""
    width = hi - lo
    if width <= 0:
        width = max(abs(lo), 1.0) * 0.2
    return lo - fraction * width, hi + fraction * width


def _finite_range(*arrays):
    values = np.concatenate([np.asarray(a, dtype=float).ravel() for a in arrays] or [np.zeros(0)])
    values = values[np.isfinite(values)]
    if values.size == 0:
        return None
    return float(values.min()), float(values.max())


# ---- matplotlib set-up ----------------------------------------------------------------------

def _pyplot():
    import matplotlib
    # Agg only when nothing chose a backend and there is no display to draw on (a script on a
    # server or in CI); notebooks and desktops keep theirs.
    headless = (sys.platform.startswith("linux") and not os.environ.get("DISPLAY")
                and not os.environ.get("WAYLAND_DISPLAY"))
    if (headless and "MPLBACKEND" not in os.environ and "matplotlib.pyplot" not in sys.modules
            and "ipykernel" not in sys.modules):
        matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


class _Style:
    def __init__(self, style):
        unknown = set(style) - _STYLE_KEYS
        if unknown:
            raise TypeError("plot: unknown style option(s) " + ", ".join(sorted(unknown))
                            + " (known: " + ", ".join(sorted(_STYLE_KEYS)) + ")")
        self.figsize = style.get("figsize", (10, 6.7))
        self.dpi = style.get("dpi")
        self.title = style.get("title", True)
        self.legend = style.get("legend", True)
        colours = {k: tuple(c / 255 for c in v) for k, v in _COLOURS.items()}
        colours.update(style.get("colors") or {})
        self.colours = colours

    def __getitem__(self, role):
        return self.colours[role]

    def fill(self, role):
        import matplotlib.colors as mcolors
        return mcolors.to_rgba(self.colours[role], _FILL_ALPHA.get(role, 0.25))

    def figure_title(self, figure, text):
        if self.title is False:
            return
        text = self.title if isinstance(self.title, str) else plplot_text(text)
        if text:
            figure.suptitle(text)


def _layout(plt, style, ax, panels, columns=1, height_ratios=None, legend_rows=1):
    """The figure and its panel axes, with a row for the legend above the panels (as plot.cpp
    puts the legend above the data). With `ax` given: those axes, and no legend row.

    `panels` is the number of panel rows (columns == 1) or of panels side by side (rows == 1).
    Returns (figure, [panel axes], legend axes or None)."""
    count = panels * columns if columns == 1 else columns
    if ax is not None:
        axes = list(ax) if isinstance(ax, (list, tuple, np.ndarray)) else [ax]
        axes = list(np.ravel(np.array(axes, dtype=object)))
        if len(axes) not in (1, count):
            raise ValueError(f"plot: this figure has {count} panel(s); pass one Axes (its main "
                             f"panel) or {count}, found {len(axes)}")
        return axes[0].figure, axes, None
    fig = plt.figure(figsize=style.figsize, dpi=style.dpi, layout="constrained")
    rows = panels if columns == 1 else 1
    ratios = list(height_ratios or [1] * rows)
    legend_height = 0.09 * legend_rows * sum(ratios) if style.legend else 0
    if legend_height:
        grid = fig.add_gridspec(rows + 1, columns, height_ratios=[legend_height] + ratios)
        legend_ax = fig.add_subplot(grid[0, :])
        legend_ax.set_axis_off()
        first = 1
    else:
        grid = fig.add_gridspec(rows, columns, height_ratios=ratios)
        legend_ax = None
        first = 0
    axes = []
    if columns == 1:
        for r in range(rows):
            axes.append(fig.add_subplot(grid[first + r, 0]))
    else:
        for c in range(columns):
            axes.append(fig.add_subplot(grid[first, c], sharey=axes[0] if axes else None))
    return fig, axes, legend_ax


def _tag(container, gid):
    """Names a container's artists (bars, error bars) with gid, so that they can be found."""
    container.trapwork_gid = gid
    for artist in container.get_children():
        artist.set_gid(gid)


def _legend(style, legend_ax, main_ax, handles, labels, columns):
    if not style.legend or not handles:
        return None
    if legend_ax is not None:
        return legend_ax.legend(handles, labels, loc="center", ncol=columns, frameon=False)
    return main_ax.legend(handles, labels, loc="best", fontsize="small")


# ---- (a) levels -----------------------------------------------------------------------------

def _allowed_intervals(x, v, e):
    """Intervals of x where V < E, ends by linear interpolation (plot.cpp)."""
    out = []
    inside = False
    start = 0.0
    for i in range(len(x)):
        below = v[i] < e
        if below and not inside:
            start = x[0] if i == 0 else x[i - 1] + (e - v[i - 1]) / (v[i] - v[i - 1]) * (x[i] - x[i - 1])
            inside = True
        elif not below and inside:
            out.append((start, x[i - 1] + (e - v[i - 1]) / (v[i] - v[i - 1]) * (x[i] - x[i - 1])))
            inside = False
    if inside:
        out.append((start, x[-1]))
    return out


def _density_peak(energies, potential, n, fraction):
    """Height of level n's scaled density above its line (plot.cpp's density_peak): fraction of
    the gap to the next level not near-degenerate with it (closer than 10% of the mean spacing;
    the gap below for the highest), at most fraction of the mean spacing."""
    e = energies
    mean = (e[-1] - e[0]) / (len(e) - 1) if len(e) > 1 else 0.0
    gap = 0.0
    for m in range(n + 1, len(e)):
        if e[m] - e[n] > 0.1 * mean:
            gap = e[m] - e[n]
            break
    if gap == 0:
        for m in range(n - 1, -1, -1):
            if e[n] - e[m] > 0.1 * mean:
                gap = e[n] - e[m]
                break
    if gap > 0:
        return fraction * min(gap, mean)
    hi, lo = float(np.max(potential)), float(np.min(potential))
    return fraction * 0.1 * max(hi - e[n], hi - lo)


def _densities(panel, x):
    rows = panel.get("densities")
    if rows is None:
        return []
    if isinstance(rows, np.ndarray) and rows.ndim == 2:
        if rows.shape[1] != len(x) and rows.shape[0] == len(x):
            rows = rows.T
        return [np.asarray(r, dtype=float) for r in rows]
    return [np.asarray(r, dtype=float).ravel() for r in rows]


def _levels_panels(f):
    panels = f.get("panels") or []
    if not 1 <= len(panels) <= 2:
        _bad("levels", "needs one or two panels")
    height = float(f.get("density_height", 0.7) if f.get("density_height") is not None else 0.7)
    if not 0 < height <= 1:
        _bad("levels", f"density_height must be in (0, 1], found {height:.4g}")
    out = []
    for p in panels:
        where = f"panel '{p.get('title', '')}'"
        x, v, e = _array(p.get("x")), _array(p.get("potential")), _array(p.get("energies"))
        if len(x) < 2:
            _bad("levels", where + ": needs at least two positions")
        _same_size("levels", where + " x and potential", x, v)
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(v))):
            _bad("levels", where + ": x and V(x) must be finite")
        if np.any(np.diff(x) < 0):
            _bad("levels", where + ": x must be ascending")
        if len(e) == 0:
            _bad("levels", where + ": no energies")
        d = _densities(p, x)
        if len(d) > len(e):
            _bad("levels", where + ": more densities than energies")
        for rho in d:
            _same_size("levels", where + " x and density", x, rho)
        walls = _array(p.get("walls"))
        if not np.all(np.isfinite(walls)):
            _bad("levels", where + ": wall positions must be finite")
        out.append({"title": p.get("title") or "", "x": x, "potential": v, "energies": e, "densities": d,
                    "walls": walls})
    return out, height


def levels_ranges(f):
    """(x ranges per panel, energy range) of a levels figure, as plot.cpp chooses them: x over
    the classically allowed region of the highest level widened by 30% on each side (within
    the data), energy from min V in that range to the highest level or density plus 6%."""
    panels, height = _levels_panels(f)
    x_ranges, energy_values, top = [], [], -math.inf
    for p in panels:
        x, v, e = p["x"], p["potential"], p["energies"]
        e_max = float(np.max(e))
        reach = e_max
        for n in range(len(p["densities"])):
            reach = max(reach, e[n] + _density_peak(e, v, n, height))
        top = max(top, reach)
        ends = [t for ab in _allowed_intervals(x, v, e_max) for t in ab]
        lo, hi = (min(ends), max(ends)) if ends else (x[0], x[-1])
        lo, hi = _padded(lo, hi, 0.3)
        lo, hi = max(lo, x[0]), min(hi, x[-1])
        if p["walls"].size:  # the walls inside the panel, with a margin beyond them
            w_lo, w_hi = _padded(float(p["walls"].min()), float(p["walls"].max()), 0.04)
            lo, hi = min(lo, w_lo), max(hi, w_hi)
        if f.get("x_min") is not None:
            lo = float(f["x_min"])
        if f.get("x_max") is not None:
            hi = float(f["x_max"])
        if not lo < hi:
            _bad("levels", "x range is empty")
        x_ranges.append((lo, hi))
        energy_values.append(v[(x >= lo) & (x <= hi)])
        energy_values.append(e)
    e_lo = _finite_range(*energy_values)[0]
    e_hi = top
    span = e_hi - e_lo if e_hi > e_lo else 1.0
    e_hi += 0.06 * span
    e_lo -= 0.03 * span
    if f.get("energy_min") is not None:
        e_lo = float(f["energy_min"])
    if f.get("energy_max") is not None:
        e_hi = float(f["energy_max"])
    if not e_lo < e_hi:
        _bad("levels", "energy range is empty")
    return x_ranges, (e_lo, e_hi)


def _draw_levels(plt, f, ax, style):
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    panels, height = _levels_panels(f)
    x_ranges, (e_lo, e_hi) = levels_ranges(f)
    any_density = any(p["densities"] for p in panels)
    fig, axes, legend_ax = _layout(plt, style, ax, 1, columns=len(panels))
    for k, (p, a) in enumerate(zip(panels, axes)):
        x, v, e = p["x"], p["potential"], p["energies"]
        for n, rho in enumerate(p["densities"]):
            top = _density_peak(e, v, n, height)
            magnitude = np.where(np.isfinite(rho), np.abs(rho), 0.0)
            peak = magnitude.max() if magnitude.size else 0.0
            if not peak > 0:
                continue
            keep = np.nonzero(magnitude > 1e-3 * peak)[0]  # trimmed to 0.1% of its peak
            span = slice(keep[0], keep[-1] + 1)
            ok = np.isfinite(rho[span])
            cx, cy = x[span][ok], e[n] + top / peak * np.abs(rho[span][ok])
            if cx.size < 2:
                continue
            fill = a.fill_between(cx, e[n], cy, color=style.fill("blue"), linewidth=0)
            fill.set_gid(f"density_fill_{n}")
            line, = a.plot(cx, cy, color=style["blue"], linewidth=1.3)
            line.set_gid(f"density_{n}")
        segments = [[(lo, en), (hi, en)] for en in e for lo, hi in _allowed_intervals(x, v, en)]
        levels = LineCollection(segments, colors=[style["orange"]], linewidths=1.5)
        levels.set_gid("levels")
        a.add_collection(levels)
        potential, = a.plot(x, v, color=style["ink"], linewidth=2.0)
        potential.set_gid("potential")
        for j, w in enumerate(p["walls"]):
            wall = a.axvline(w, color=style["ink"], linewidth=4.5)
            wall.set_gid(f"wall_{j}")
        a.set_xlim(*x_ranges[k])
        a.set_ylim(e_lo, e_hi)
        a.set_xlabel(plplot_text(f.get("x_label")))
        if k == 0:
            a.set_ylabel(plplot_text(f.get("energy_label")))
        else:
            a.tick_params(labelleft=False)
        if p["title"]:
            a.set_title(plplot_text(p["title"]))
        a.grid(True, color="0.88", linewidth=0.6)
    handles = [Line2D([], [], color=style["ink"], linewidth=2.0),
               Line2D([], [], color=style["orange"], linewidth=1.5)]
    labels = ["potential V(x)", plplot_text("levels E#dn#u (where V < E#dn#u)")]
    if any(p["walls"].size for p in panels):
        handles.append(Line2D([], [], color=style["ink"], linewidth=4.5))
        labels.append("hard walls")
    if any_density:
        handles.append((Patch(facecolor=style.fill("blue")), Line2D([], [], color=style["blue"])))
        labels.append(plplot_text("|ψ#dn#u(x)|#u2#d (scaled)"))
    _legend(style, legend_ax, axes[0], handles, labels, 3)
    style.figure_title(fig, f.get("title"))
    return fig


# ---- (b) work distribution --------------------------------------------------------------------

def _series(f, key):
    s = f.get(key)
    if s is None:
        return None
    out = {"label": s.get("label") or "", "work": _array(s.get("work")),
           "probability": _array(s.get("probability")),
           "density_work": _array(s.get("density_work")), "density": _array(s.get("density"))}
    _same_size("work", f"'{out['label']}' work and probability", out["work"], out["probability"])
    _same_size("work", f"'{out['label']}' density grid and density", out["density_work"], out["density"])
    bad = ~(np.isfinite(out["work"]) & (out["probability"] >= 0))
    if np.any(bad):
        _bad("work", f"'{out['label']}': line {int(np.argmax(bad))} needs finite W and P >= 0")
    return out


def _bulk_range(series, tail):
    """Work range of the lines left after dropping from each end lines that together carry at
    most `tail` of the probability (plot.cpp's bulk_range); None without lines."""
    w = np.concatenate([s["work"] for s in series])
    p = np.concatenate([s["probability"] for s in series])
    total = p.sum()
    if w.size == 0 or not total > 0:
        return None
    order = np.lexsort((p, w))
    w, p = w[order], p[order]
    lo, hi = 0, len(w) - 1
    dropped = p[lo]
    while dropped <= tail * total and lo < hi:
        lo += 1
        dropped += p[lo]
    dropped = p[hi]
    while dropped <= tail * total and hi > lo:
        hi -= 1
        dropped += p[hi]
    return float(w[lo]), float(w[hi])


def _nice_step(span, max_ticks):
    """plot.cpp's nice_step: 1, 2 or 5 x 10^k nearest (in ratio) to span / max_ticks."""
    raw = span / max_ticks
    decade = 10.0 ** math.floor(math.log10(raw))
    best = decade
    for m in (2.0, 5.0, 10.0):
        if abs(math.log(m * decade / raw)) < abs(math.log(best / raw)):
            best = m * decade
    return best


def _tick_offset(lo, hi):
    """plot.cpp's tick_offset: W0 subtracted from a panel's tick labels where the panel is
    narrower than 1e-3 of its largest |W| (its centre rounded to 10 tick steps), else 0."""
    width, size = hi - lo, max(abs(lo), abs(hi))
    if not width > 0 or width >= 1e-3 * size:
        return 0.0
    coarse = 10 * _nice_step(width, 5)
    return round(0.5 * (lo + hi) / coarse) * coarse


def work_panel_ranges(f):
    """The ranges of a work figure: a port of plot.cpp's work_panel_ranges (plot.hpp states the
    rule), kept identical to it. Returns a dict with the fields of WorkPanelRanges."""
    result, reference = _series(f, "result"), _series(f, "reference")
    if result["work"].size == 0 and result["density"].size == 0:
        _bad("work", "no work values")
    decades = float(f.get("log_decades") if f.get("log_decades") is not None else 12)
    if not decades > 0:
        _bad("work", "log_decades must be > 0")
    axis = str(f.get("probability_axis") or "linear_and_log").lower()
    if axis not in ("linear_and_log", "linear", "log"):
        _bad("work", f"unknown probability_axis '{axis}' (linear_and_log, linear, log)")
    resolution = f.get("resolution")
    if resolution is not None and not (math.isfinite(float(resolution)) and float(resolution) > 0):
        _bad("work", f"resolution must be finite and > 0, found {float(resolution):.4g}")
    series = [result] + ([reference] if reference else [])
    p_max = max([float(np.max(s["probability"])) for s in series if s["probability"].size] + [0.0])
    d_max = max([float(np.max(d[np.isfinite(d)])) for d in (s["density"] for s in series)
                 if np.isfinite(d).any()] + [0.0])
    headroom = 1.3  # above the tallest stem: room for the marker labels
    has_density = d_max > 0 and axis != "log"
    log_headroom = 0.5 + 0.2 * decades if axis == "log" else 0.5
    log_top = math.log10(p_max if p_max > 0 else 1.0) + log_headroom
    r = {"probability_top": (p_max if p_max > 0 else 1.0) * headroom,
         "density_top": d_max * headroom if has_density else 0.0,
         "log_top": log_top, "log_floor": log_top - log_headroom - decades}

    markers = [float(f[k]) for k in ("mean_work", "free_energy_change") if f.get(k) is not None]
    floor = 10.0 ** r["log_floor"]
    work = np.concatenate([s["work"] for s in series])
    prob = np.concatenate([s["probability"] for s in series])
    above = prob > floor
    r["lines_drawn"], r["lines_below_floor"] = int(above.sum()), int((~above).sum())
    drawn_of = [int((s["probability"] > floor).sum()) for s in series] + [0]
    wr = _finite_range(work[above])
    if wr is None:
        wr = _finite_range(*[s["density_work"] for s in series])
    wr = _finite_range(*([wr] if wr else []), markers)
    if wr is None:
        _bad("work", "no finite work values")

    # Linear panel: the lines carrying the probability, widened by 3 resolution, the density's
    # peak and the markers.
    linear = _bulk_range(series, 1e-3)
    sigma = float(resolution) if has_density and resolution is not None else 0.0
    extra = list(markers)
    if linear is not None:
        linear = (linear[0] - 3 * sigma, linear[1] + 3 * sigma)
    for s in series:
        d = s["density"]
        if d.size and has_density:
            k = int(np.argmax(np.where(np.isnan(d), -np.inf, d)))
            if math.isfinite(d[k]) and d[k] > 0:
                extra.append(float(s["density_work"][k]))
    if axis == "linear" and work.size:
        extra += [float(work.min()), float(work.max())]
    linear = _finite_range(*([linear] if linear else []), extra)
    if linear is None:
        linear = wr
    wr = _padded(*wr, 0.04)
    linear = _padded(*linear, 0.08)
    r["own_range"] = axis == "linear_and_log" and linear[1] - linear[0] < 0.5 * (wr[1] - wr[0])
    if axis == "linear_and_log" and not r["own_range"]:
        wr = (min(wr[0], linear[0]), max(wr[1], linear[1]))
        linear = wr
    r["linear_range"], r["log_range"] = linear, wr
    r["linear_offset"], r["log_offset"] = _tick_offset(*linear), _tick_offset(*wr)
    # Log-panel stems thinned with the number of each series' lines drawn.
    crowd = [math.sqrt(40.0 / n) if n > 40 else 1.0 for n in drawn_of[:2]]
    r["marker_scale"] = [0.8 * c if 0.8 * c >= 0.2 else 0.0 for c in crowd]
    r["stem_width"] = [max(0.5, 2.2 * c) for c in crowd]
    return r


def work_caption(f, r):
    """plot.cpp's work_caption: the caption lines (the densities' width and its source; the
    lines left out of the log panel)."""
    lines = []
    if (r["density_top"] or 0) > 0 and f.get("resolution") is not None:
        text = "densities: the lines broadened by a Gaussian of width #gs = " + _number(float(f["resolution"]))
        label = f.get("work_label") or ""
        a, b = label.rfind("("), label.rfind(")")
        if a >= 0 and b > a:
            text += " " + label[a + 1:b]
        if f.get("resolution_source"):
            text += " (" + f["resolution_source"] + ")"
        lines.append(text)
    axis = str(f.get("probability_axis") or "linear_and_log").lower()
    n = r["lines_below_floor"]
    if n > 0 and axis != "linear":
        lines.append(f"{n} line{'' if n == 1 else 's'} below P = {10.0 ** r['log_floor']:.2g} not drawn in the log panel")
    return lines


def work_layout(f):
    """work_panel_ranges with the panels and series ('panels': list of 'linear' / 'log',
    'work_range' (log panel) and 'linear_work_range' in W, 'series')."""
    r = work_panel_ranges(f)
    axis = str(f.get("probability_axis") or "linear_and_log").lower()
    r.update({
        "panels": {"linear_and_log": ["linear", "log"], "linear": ["linear"], "log": ["log"]}[axis],
        "work_range": r["log_range"], "linear_work_range": r["linear_range"],
        "density_top": r["density_top"] if r["density_top"] > 0 else None,
        "series": [s for s in (_series(f, "result"), _series(f, "reference")) if s is not None],
    })
    return r


def _number(v):
    return f"{v:.4g}"


def _draw_work(plt, f, ax, style):
    import matplotlib.transforms as mtransforms
    from matplotlib.lines import Line2D

    lay = work_layout(f)
    series = lay["series"]
    kinds = lay["panels"]
    ratios = [0.55, 0.45] if len(kinds) == 2 else [1]
    has_density = lay["density_top"] is not None
    fig, axes, legend_ax = _layout(plt, style, ax, len(kinds), height_ratios=ratios,
                                   legend_rows=2 if has_density else 1)
    kinds = kinds[:len(axes)]
    if len(kinds) == 2 and not lay["own_range"]:
        axes[0].sharex(axes[1])
    colours = [style["blue"], style["orange"]]
    for a, kind in zip(axes, kinds):
        log = kind == "log"
        if log:
            a.set_yscale("log")
            floor, top = 10.0 ** lay["log_floor"], 10.0 ** lay["log_top"]
            a.set_xlim(*lay["work_range"])
            a.set_ylabel("P (log scale)")
        else:
            floor, top = 0.0, lay["probability_top"]
            a.set_xlim(*lay["linear_work_range"])
            a.set_ylabel("probability P")
        a.set_ylim(floor, top)
        a.grid(True, color="0.88", linewidth=0.6)
        x_lo, x_hi = a.get_xlim()
        shift = lay["log_offset" if log else "linear_offset"]
        a.set_xlabel(plplot_text(_offset_label(f.get("work_label") or "", shift)))
        if shift != 0:  # ticks show W - W0 (plot.cpp draws in shifted coordinates)
            from matplotlib.ticker import FuncFormatter
            a.xaxis.set_major_formatter(FuncFormatter(lambda x, pos, w0=shift: f"{x - w0:.6g}"))
        if len(kinds) == 2 and kind == "linear" and not lay["own_range"]:
            a.set_xlabel("")
            a.tick_params(labelbottom=False)

        # Markers: Delta F dotted purple (label left), <W> dashed green (label right), labels at
        # two heights so that they cannot overlap, only where the log panel is not below.
        def marker(w, text, role, dashes, prefer_left, height):
            line = a.axvline(w, color=style[role], linestyle=dashes, linewidth=1.5)
            line.set_gid("mean_work" if role == "green" else "free_energy_change")
            if log and len(kinds) > 1:
                return
            width_pt = a.get_position().width * fig.get_figwidth() * 72
            text_fraction = 0.62 * 10 * len(text) / max(width_pt, 1)  # ~0.62 em per character
            w_fraction = (w - x_lo) / (x_hi - x_lo)
            left = prefer_left
            if left and w_fraction - 0.01 - text_fraction < 0:
                left = False
            elif not left and w_fraction + 0.01 + text_fraction > 1:
                left = True
            shift = mtransforms.offset_copy(a.get_xaxis_transform(), fig=fig, x=-4 if left else 4,
                                            y=0, units="points")
            a.text(w, height, plplot_text(text), color=style[role], transform=shift,
                   ha="right" if left else "left", va="center", gid=line.get_gid() + "_label")

        if f.get("free_energy_change") is not None:
            dF = float(f["free_energy_change"])
            marker(dF, "#gDF = " + _number(dF), "purple", ":", True, 0.83)
        if f.get("mean_work") is not None:
            mw = float(f["mean_work"])
            marker(mw, "<W> = " + _number(mw), "green", "--", False, 0.92)

        offset = 0.004 * (x_hi - x_lo) if len(series) > 1 else 0.0
        for k in reversed(range(len(series))):  # the result over the reference
            s = series[k]
            p = s["probability"]
            shown = p > floor
            x = s["work"][shown] + (offset if k == 1 else 0.0)
            # plot.cpp's sizes scaled to matplotlib's: stems 2.2 px -> 1.4 pt, markers 0.8 -> 5 pt
            scale = lay["marker_scale"][k] if log else 0.8
            width = lay["stem_width"][k] if log else 2.2
            # too many lines for markers: light stems, each top a small dot (plot.cpp's draw_stems)
            stems = a.vlines(x, floor, p[shown], colors=[colours[k]], linewidth=1.4 * width / 2.2,
                             alpha=1.0 if scale > 0 else 0.3)
            stems.set_gid(("result" if k == 0 else "reference") + "_stems")
            if scale == 0:
                dots, = a.plot(x, p[shown], linestyle="none", marker=".", markersize=2, color=colours[k])
                dots.set_gid(("result" if k == 0 else "reference") + "_dots")
            else:
                tops, = a.plot(x, p[shown], linestyle="none", marker="o", markersize=5 * scale / 0.8,
                               markerfacecolor=colours[k] if k == 0 else "none",
                               markeredgecolor=colours[k])
                tops.set_gid(("result" if k == 0 else "reference") + "_tops")
        if has_density and not log:
            right = a.twinx()
            right.set_ylim(0, lay["density_top"])
            right.set_ylabel(plplot_text(f.get("density_label") or "density (right axis)"))
            for k in reversed(range(len(series))):
                s = series[k]
                if s["density"].size:
                    curve, = right.plot(s["density_work"], s["density"], color=colours[k],
                                        linestyle="-" if k == 0 else "--", linewidth=1.6)
                    curve.set_gid(("result" if k == 0 else "reference") + "_density")
            a.set_zorder(right.get_zorder() + 1)  # stems over the density
            a.patch.set_visible(False)
    handles, labels = [], []
    for k, s in enumerate(series):
        handles.append(Line2D([], [], color=colours[k], marker="o",
                              markerfacecolor=colours[k] if k == 0 else "none"))
        labels.append(plplot_text((s["label"] or "lines") + ": P#di#u"))
        if has_density and s["density"].size:
            handles.append(Line2D([], [], color=colours[k], linestyle="-" if k == 0 else "--"))
            labels.append("broadened (right axis)")
    _legend(style, legend_ax, axes[0], handles, labels, 2)
    caption = work_caption(f, lay)
    if caption:
        # below the bottom panel's tick labels and axis title; inside the constrained layout
        axes[-1].annotate("\n".join(map(plplot_text, caption)), xy=(0.5, 0), xycoords="axes fraction", xytext=(0, -36),
                          textcoords="offset points", ha="center", va="top", fontsize="small", gid="caption")
    style.figure_title(fig, f.get("title"))
    return fig


def _offset_label(label, offset):
    """plot.cpp's offset_label: the axis title with the offset its ticks leave out."""
    if offset == 0:
        return label
    return label + ",  ticks: W - W#d0#u, W#d0#u = " + f"{offset:.10g}"


# ---- (c) sweep --------------------------------------------------------------------------------

def _sweep_points_curves(f):
    points = [{"label": p.get("label") or "", "x": _array(p.get("x")), "y": _array(p.get("y")),
               "spread": _array(p.get("spread"))} for p in (f.get("points") or [])]
    curves = [{"label": c.get("label") or "", "x": _array(c.get("x")), "y": _array(c.get("y"))}
              for c in (f.get("curves") or [])]
    for p in points:
        _same_size("sweep", f"'{p['label']}' x and y", p["x"], p["y"])
        if p["spread"].size:
            _same_size("sweep", f"'{p['label']}' y and spread", p["y"], p["spread"])
    for c in curves:
        _same_size("sweep", f"curve '{c['label']}' x and y", c["x"], c["y"])
        if np.any(np.diff(c["x"]) < 0):
            _bad("sweep", f"curve '{c['label']}': x must be ascending")
    return points, curves


def _sweep_data(f):
    points, curves = _sweep_points_curves(f)
    if not points and not curves:
        _bad("sweep", "nothing to draw")
    departure = str(f.get("departure") or "none").lower()
    if departure not in ("none", "relative", "absolute"):
        _bad("sweep", f"unknown departure '{departure}' (none, relative, absolute)")
    if departure != "none" and not curves:
        _bad("sweep", "a departure panel needs an analytic curve")
    panels = []
    for panel in f.get("panels") or []:
        pp, pc = _sweep_points_curves(panel)
        panels.append({"y_label": panel.get("y_label") or "", "points": pp, "curves": pc,
                       "log_y": bool(panel.get("log_y"))})
    return points, curves, departure, panels


def _sweep_panel(points, curves, log_y, shown_x):
    """plot.cpp's drawn_sweep_panel: points (finite on both axes; values <= 0 left out on a log
    y axis) with y -+ spread, and the y range in axis units (log10 on a log axis)."""
    shown_y = (lambda y: np.where(y > 0, np.log10(np.where(y > 0, y, 1.0)), np.nan)) if log_y else (lambda y: y)
    drawn = []
    for p in points:
        s = np.abs(p["spread"]) if p["spread"].size else np.zeros_like(p["y"])
        keep = np.isfinite(shown_x(p["x"])) & np.isfinite(shown_y(p["y"]))
        d = {"x": p["x"][keep], "y": p["y"][keep], "lo": (p["y"] - s)[keep], "hi": (p["y"] + s)[keep],
             "spread": p["spread"].size > 0}
        drawn.append(d)
    yr = _finite_range(*[shown_y(d["y"]) for d in drawn], *[shown_y(d["lo"]) for d in drawn],
                       *[shown_y(d["hi"]) for d in drawn])
    # On a log axis the points set the range (a curve's zeros would stretch it over many decades;
    # the curves are clipped), the curves only where there are no points.
    if not log_y or yr is None:
        yr = _finite_range(*([yr] if yr else []), *[shown_y(c["y"]) for c in curves])
    return drawn, yr


def _whole_decades(lo, hi):
    """plot.cpp's whole_decades: a log axis (log10 lo .. hi) with fewer than two labelled decades
    widened to whole decades."""
    if math.floor(hi) - math.ceil(lo) >= 1:
        return lo, hi
    return float(math.floor(lo)), float(math.ceil(hi))


def sweep_layout(f):
    """Points, departures and ranges of a sweep figure as plot.cpp computes them: x padded by 3%
    (of log10 x on a log axis), y of each panel by 6% (of log10 y on a log axis), the departure
    panel (including 0) by 10%; error bars reaching below 0 on a log axis end at the floor."""
    points, curves, departure, panels = _sweep_data(f)
    log_x = bool(f.get("log_x"))
    log_y = bool(f.get("log_y"))
    shown = (lambda x: np.where(x > 0, np.log10(np.where(x > 0, x, 1.0)), np.nan)) if log_x else (lambda x: x)
    drawn, yr = _sweep_panel(points, curves, log_y, shown)
    departures = []
    for p in points:
        s = np.abs(p["spread"]) if p["spread"].size else np.zeros_like(p["y"])
        e = {"x": np.zeros(0), "y": np.zeros(0), "lo": np.zeros(0), "hi": np.zeros(0), "spread": p["spread"].size > 0}
        if departure != "none":
            c = curves[0]
            ref = np.interp(p["x"], c["x"], c["y"], left=np.nan, right=np.nan) if c["x"].size else np.full(p["x"].shape, np.nan)
            dev, err = p["y"] - ref, s.copy()
            keep = np.isfinite(shown(p["x"]))
            if departure == "relative":
                keep &= ref != 0
                with np.errstate(divide="ignore", invalid="ignore"):
                    dev, err = dev / ref, err / np.abs(ref)
            keep &= np.isfinite(dev)
            e = {"x": p["x"][keep], "y": dev[keep], "lo": (dev - err)[keep], "hi": (dev + err)[keep],
                 "spread": e["spread"]}
        departures.append(e)
    more = []
    for panel in panels:
        d, r = _sweep_panel(panel["points"], panel["curves"], panel["log_y"], shown)
        more.append(dict(panel, drawn=d, y_range=r if r is not None else (0.0, 1.0)))
    xr = _finite_range(*[shown(d["x"]) for d in drawn], *[shown(c["x"]) for c in curves],
                       *[shown(d["x"]) for m in more for d in m["drawn"]],
                       *[shown(c["x"]) for m in more for c in m["curves"]])
    if xr is None or yr is None:
        _bad("sweep", "no finite values")
    dr = _finite_range([0.0], *[e["lo"] for e in departures], *[e["hi"] for e in departures])
    xr = _padded(*xr, 0.03)
    if log_x:
        xr = (10.0 ** xr[0], 10.0 ** xr[1])

    def y_axis(r, log):
        lo, hi = _padded(*r, 0.06)
        if log:
            lo, hi = _whole_decades(lo, hi)
        return (10.0 ** lo, 10.0 ** hi) if log else (lo, hi)

    y_range = y_axis(yr, log_y)
    for d in drawn:
        if log_y:
            d["lo"] = np.where(d["lo"] > 0, d["lo"], y_range[0])
    for m in more:
        m["y_range"] = y_axis(m["y_range"], m["log_y"])
        for d in m["drawn"]:
            if m["log_y"]:
                d["lo"] = np.where(d["lo"] > 0, d["lo"], m["y_range"][0])
    return {"points": points, "curves": curves, "departure": departure, "log_x": log_x, "log_y": log_y,
            "drawn": drawn, "departures": departures, "x_range": xr, "panels": more,
            "y_range": y_range, "departure_range": _padded(*dr, 0.1)}


def _draw_points(a, d, band, k, style, gid):
    role = _POINT_ROLES[k % 3]
    if d["x"].size == 0:
        return
    if d["spread"] and band:
        order = np.argsort(d["x"], kind="stable")
        fill = a.fill_between(d["x"][order], d["lo"][order], d["hi"][order], color=style.fill(role), linewidth=0)
        fill.set_gid(gid + "_band")
    elif d["spread"]:
        bars = a.errorbar(d["x"], d["y"], yerr=[d["y"] - d["lo"], d["hi"] - d["y"]], fmt="none",
                          ecolor=style[role], elinewidth=1.2, capsize=3)
        _tag(bars, gid + "_errorbars")
    marks, = a.plot(d["x"], d["y"], linestyle="none", marker="o", markersize=5, color=style[role])
    marks.set_gid(gid)


def _draw_curves(a, curves, style, prefix):
    for k, c in enumerate(curves):
        line, = a.plot(c["x"], c["y"], color=style[_CURVE_ROLES[k % 3]],
                       linestyle="-" if k == 0 else "--", linewidth=1.8)
        line.set_gid(f"{prefix}curve_{k}")


def _draw_sweep(plt, f, ax, style):
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    lay = sweep_layout(f)
    two = lay["departure"] != "none"
    more = lay["panels"]
    band = bool(f.get("spread_as_band"))
    ratios = [1.6] + [1] * ((1 if two else 0) + len(more))
    fig, axes, legend_ax = _layout(plt, style, ax, len(ratios), height_ratios=ratios)
    main = axes[0]
    lower = axes[1] if two and len(axes) > 1 else None
    further = axes[(2 if two else 1):] if len(axes) == len(ratios) else []
    for a in axes:
        if lay["log_x"]:
            a.set_xscale("log")
        a.set_xlim(*lay["x_range"])
        a.grid(True, color="0.88", linewidth=0.6)
        if a is not main:
            a.sharex(main)
    for a in axes[:-1]:
        a.tick_params(labelbottom=False)
    axes[-1].set_xlabel(plplot_text(f.get("x_label")))
    if lay["log_y"]:
        main.set_yscale("log")
    main.set_ylim(*lay["y_range"])
    main.set_ylabel(plplot_text(f.get("y_label")))
    for k, d in enumerate(lay["drawn"]):
        _draw_points(main, d, band, k, style, f"points_{k}")
    _draw_curves(main, lay["curves"], style, "")
    if lower is not None:
        relative = lay["departure"] == "relative"
        lower.set_ylim(*lay["departure_range"])
        label = f.get("departure_label") or ("relative departure" if relative else "departure")
        lower.set_ylabel(plplot_text(label))
        zero = lower.axhline(0.0, color=style[_CURVE_ROLES[0]], linestyle="--", linewidth=1.3)
        zero.set_gid("departure_zero")
        for k, e in enumerate(lay["departures"]):
            _draw_points(lower, e, band, k, style, f"departure_{k}")
        lower.text(0.0, 1.02, plplot_text(("below: (y - c) / c,  c = " if relative else "below: y - c,  c = ")
                                           + lay["curves"][0]["label"]),
                   transform=lower.transAxes, fontsize="small", va="bottom")
    for i, (a, m) in enumerate(zip(further, more)):
        if m["log_y"]:
            a.set_yscale("log")
        a.set_ylim(*m["y_range"])
        a.set_ylabel(plplot_text(m["y_label"]))
        for k, d in enumerate(m["drawn"]):
            _draw_points(a, d, band, k, style, f"panel_{i}_points_{k}")
        _draw_curves(a, m["curves"], style, f"panel_{i}_")
    handles, labels = [], []

    def add(points, curves, drawn):
        for k, p in enumerate(points):
            if p["label"] and plplot_text(p["label"]) in labels:
                continue
            role = _POINT_ROLES[k % 3]
            mark = Line2D([], [], linestyle="none", marker="o", color=style[role])
            handles.append((Patch(facecolor=style.fill(role)), mark) if band and drawn[k]["spread"] else mark)
            labels.append(plplot_text(p["label"]))
        for k, c in enumerate(curves):
            if not c["label"] or plplot_text(c["label"]) in labels:
                continue  # an unlabelled curve (a marker line) stays out of the legend
            handles.append(Line2D([], [], color=style[_CURVE_ROLES[k % 3]], linestyle="-" if k == 0 else "--"))
            labels.append(plplot_text(c["label"]))

    add(lay["points"], lay["curves"], lay["drawn"])
    for m in more:
        add(m["points"], m["curves"], m["drawn"])
    if len(axes) > 2:  # as plot.cpp: panels too short for a rotated label carry it above them
        for a in axes:
            a.set_title(a.get_ylabel(), loc="left", fontsize="medium")
            a.yaxis.label.set_visible(False)
        if lower is not None:
            lower.texts[-1].set_visible(False)  # the departure note, now beside its title
            lower.set_title(lower.get_ylabel() + "     (" + lower.texts[-1].get_text()[7:] + ")",
                            loc="left", fontsize="medium")
    _legend(style, legend_ax, main, handles, labels, 2)
    style.figure_title(fig, f.get("title"))
    return fig


# ---- (d) measured data against a model ----------------------------------------------------------

def comparison_layout(f):
    """Bins, pulls and ranges of a comparison figure as plot.cpp computes them: counts from 0 to
    1.15 x the highest of count + sqrt(count), expected and curve; x over the edges + 2%; pulls
    (O - E)/sqrt(E) of bins expecting at least one run, range at least -3..3, padded 10%."""
    edges, observed, expected = _array(f.get("edges")), _array(f.get("observed")), _array(f.get("expected"))
    if edges.size < 2:
        _bad("comparison", "needs at least one bin (two edges)")
    bins = edges.size - 1
    if observed.size != bins or expected.size != bins:
        _bad("comparison", f"observed and expected need one value per bin ({bins})")
    if not (np.all(np.isfinite(edges)) and np.all(np.diff(edges) > 0)):
        _bad("comparison", "bin edges must be finite and ascending")
    bad = ~(np.isfinite(observed) & np.isfinite(expected) & (observed >= 0) & (expected >= 0))
    if np.any(bad):
        _bad("comparison", f"bin {int(np.argmax(bad))} needs finite counts >= 0")
    curve_work, curve = _array(f.get("curve_work")), _array(f.get("curve"))
    _same_size("comparison", "curve", curve_work, curve)
    centre = 0.5 * (edges[:-1] + edges[1:])
    used = expected >= 1  # bins expecting less than one run would only add clutter near 0
    pull = np.full(bins, np.nan)
    pull[used] = (observed[used] - expected[used]) / np.sqrt(expected[used])
    y_hi = _finite_range([0.0], observed + np.sqrt(observed), expected, curve)[1]
    p_range = _finite_range([-3.0, 3.0], pull)
    pad = 0.02 * (edges[-1] - edges[0])
    return {"edges": edges, "observed": observed, "expected": expected, "centre": centre,
            "pull": pull, "curve_work": curve_work, "curve": curve,
            "x_range": (edges[0] - pad, edges[-1] + pad), "count_top": y_hi * 1.15,
            "pull_range": _padded(*p_range, 0.1)}


def _draw_comparison(plt, f, ax, style):
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    lay = comparison_layout(f)
    fig, axes, legend_ax = _layout(plt, style, ax, 2, height_ratios=[0.62, 0.38])
    main = axes[0]
    lower = axes[1] if len(axes) > 1 else None
    edges, observed, expected = lay["edges"], lay["observed"], lay["expected"]
    filled = observed > 0
    bars = main.bar(edges[:-1][filled], observed[filled], width=np.diff(edges)[filled], align="edge",
                    color=style.fill("blue"), linewidth=0)
    _tag(bars, "observed")
    low = np.maximum(0.0, observed - np.sqrt(observed))
    errors = main.errorbar(lay["centre"][filled], observed[filled],
                           yerr=[observed[filled] - low[filled], np.sqrt(observed[filled])],
                           fmt="none", ecolor=style["blue"], elinewidth=1.1, capsize=2)
    _tag(errors, "observed_errorbars")
    steps = main.stairs(expected, edges, baseline=None, color=style["orange"], linewidth=1.8)
    steps.set_gid("expected")
    if lay["curve"].size:
        curve, = main.plot(lay["curve_work"], lay["curve"], color=style["orange"], linestyle="--", linewidth=1.3)
        curve.set_gid("curve")
    if f.get("model_mean") is not None:
        main.axvline(float(f["model_mean"]), color=style["green"], linestyle="--", linewidth=1.5, gid="model_mean")
    if f.get("data_mean") is not None:
        main.axvline(float(f["data_mean"]), color=style["purple"], linestyle=":", linewidth=1.5, gid="data_mean")
    main.set_xlim(*lay["x_range"])
    main.set_ylim(0, lay["count_top"])
    main.set_ylabel(plplot_text(f.get("count_label") or "runs per bin"))
    main.grid(True, color="0.88", linewidth=0.6)
    if lower is not None:
        lower.sharex(main)
        main.tick_params(labelbottom=False)
        lower.set_ylim(*lay["pull_range"])
        lower.set_xlabel(plplot_text(f.get("work_label")))
        lower.set_ylabel("pull (O - E)/√E")
        lower.axhline(0.0, color=style["grey"], linestyle="--", linewidth=1.2)
        used = np.isfinite(lay["pull"])
        pulls, = lower.plot(lay["centre"][used], lay["pull"][used], linestyle="none", marker="o",
                            markersize=4, color=style["blue"])
        pulls.set_gid("pulls")
        lower.grid(True, color="0.88", linewidth=0.6)
    else:
        main.set_xlabel(plplot_text(f.get("work_label")))
    observed_label = f.get("observed_label") or "measured"
    expected_label = f.get("expected_label") or "model"
    handles = [Patch(facecolor=style.fill("blue"), edgecolor=style["blue"]),
               Line2D([], [], color=style["orange"], linewidth=1.8)]
    labels = [plplot_text(observed_label + " (±√count)"), plplot_text(expected_label + ": expected runs per bin")]
    if lay["curve"].size:
        handles.append(Line2D([], [], color=style["orange"], linestyle="--"))
        labels.append(plplot_text(expected_label + " density x runs x bin width"))
    if f.get("model_mean") is not None:
        handles.append(Line2D([], [], color=style["green"], linestyle="--"))
        labels.append("model <W>")
    if f.get("data_mean") is not None:
        handles.append(Line2D([], [], color=style["purple"], linestyle=":"))
        labels.append("measured <W>")
    _legend(style, legend_ax, main, handles, labels, 3)
    style.figure_title(fig, f.get("title"))
    return fig


# ---- (e) stacked panels over one x ------------------------------------------------------------

_STACK_ROLES = ("ink", "blue", "orange", "green", "red", "purple", "grey")


def stack_layout(f):
    """Panels and ranges of a stacked figure as plot.cpp computes them: x over every curve + 2%,
    each panel's y over its curves + 8% (0..1 for a panel without finite values)."""
    panels = f.get("stack") or []
    if not 1 <= len(panels) <= 6:
        _bad("stack", "needs one to six panels")
    out, xs = [], []
    for p in panels:
        curves = [{"label": c.get("label") or "", "x": _array(c.get("x")), "y": _array(c.get("y"))}
                  for c in (p.get("curves") or [])]
        if not curves:
            _bad("stack", f"panel '{p.get('y_label', '')}': nothing to draw")
        for c in curves:
            _same_size("stack", f"curve '{c['label']}' x and y", c["x"], c["y"])
            if np.any(np.diff(c["x"]) < 0):
                _bad("stack", f"curve '{c['label']}': x must be ascending")
            xs.append(c["x"])
        yr = _finite_range(*[c["y"] for c in curves]) or (0.0, 1.0)
        out.append({"y_label": p.get("y_label") or "", "curves": curves, "markers": bool(p.get("markers")),
                    "y_range": _padded(*yr, 0.08)})
    xr = _finite_range(*xs)
    if xr is None:
        _bad("stack", "no finite x values")
    return {"panels": out, "x_range": _padded(*xr, 0.02)}


def _draw_stack(plt, f, ax, style):
    lay = stack_layout(f)
    n = len(lay["panels"])
    if ax is not None:
        fig, axes, _ = _layout(plt, style, ax, n)
    else:
        fig = plt.figure(figsize=style.figsize, dpi=style.dpi, layout="constrained")
        axes = list(np.ravel(fig.subplots(n, 1, sharex=True, squeeze=False)))
    for k, (p, a) in enumerate(zip(lay["panels"], axes)):
        for j, c in enumerate(p["curves"]):
            line, = a.plot(c["x"], c["y"], color=style[_STACK_ROLES[j % 7]], linewidth=1.6,
                           marker="o" if p["markers"] else None, markersize=3,
                           label=plplot_text(c["label"]))
            line.set_gid(f"stack_{k}_curve_{j}")
        a.set_xlim(*lay["x_range"])
        a.set_ylim(*p["y_range"])
        a.set_ylabel(plplot_text(p["y_label"]))
        a.grid(True, color="0.88", linewidth=0.6)
        if style.legend:
            a.legend(loc="best", fontsize="small", ncol=min(len(p["curves"]), 5))
    axes[len(lay["panels"]) - 1 if len(axes) >= n else 0].set_xlabel(plplot_text(f.get("x_label")))
    style.figure_title(fig, f.get("title"))
    return fig


_DRAW = {"levels": _draw_levels, "work": _draw_work, "sweep": _draw_sweep, "comparison": _draw_comparison,
         "stack": _draw_stack}


def _draw(figure, ax, style):
    return _DRAW[_kind(figure)](_pyplot(), figure, ax, style)


def plot(result, name=None, ax=None, **style):
    """Draw trapwork figures with matplotlib; returns the matplotlib Figure(s).

    result: a result object (anything with ``.figures``, a dict stem -> figure dict), such a
        dict itself, or one figure dict (with ``"kind"``).
    name: the figure to draw (``"work"``, ``"potential"``, ``"sweep"``, ``"compare"``, ...).
        When None, a result's figures are all drawn and a dict stem -> Figure is returned;
        a single figure dict gives its Figure.
    ax: draw into existing axes instead of a new figure: one Axes (the figure's main panel
        only: the first levels panel, the linear work panel (the log one for
        probability_axis "log"), the upper sweep or comparison panel) or one Axes per panel.
    style: figsize (inches), dpi, title (False: none; a string: this one), legend (False: none),
        colors (dict role -> matplotlib colour, roles ink, blue, orange, green, red, purple, grey).

    The panels, ranges and markers are those of the command line's PLplot pictures
    (solver/scenario/plot.cpp): levels with the x range over the classically allowed region
    of the highest level widened by 30%, work stems with the broadened density on a right axis
    and a log panel down to max P x 10^-log_decades, sweep points with error bars or a band and
    an optional departure panel, measured counts with sqrt(count) error bars against the
    model's expected counts and the pulls below.
    """
    options = _Style(style)
    if _is_figure(result):
        if name is not None:
            raise ValueError("plot: name is for a result or a dict of figures, not one figure")
        return _draw(result, ax, options)
    figures = getattr(result, "figures", result)
    if not isinstance(figures, dict):
        raise TypeError("plot: expected a trapwork result, a dict of figures or one figure dict, found "
                        + type(result).__name__)
    if name is not None:
        if name not in figures:
            known = ", ".join(sorted(figures)) or "none"
            raise KeyError(f"plot: no figure '{name}' (this result has: {known})")
        return _draw(figures[name], ax, options)
    if ax is not None and len(figures) != 1:
        raise ValueError("plot: ax needs name= when the result has several figures ("
                         + ", ".join(sorted(figures)) + ")")
    return {stem: _draw(figure, ax, options) for stem, figure in figures.items()}
