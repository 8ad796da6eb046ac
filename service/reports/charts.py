"""The charts of a report, drawn with matplotlib's SVG backend and returned as inline SVG.

Object-oriented matplotlib only (``Figure`` + ``FigureCanvasSVG``, no pyplot):
reports are drawn off the event loop in a worker thread. Text stays text in
the SVG (``svg.fonttype = "none"``), ids are salted per chart so several
charts can share one HTML page, and the XML prolog and metadata are dropped
so the page holds no reference to anything outside itself.
"""
from __future__ import annotations

import io
import re
import threading
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.blocks import BlockSeries

if TYPE_CHECKING:  # matplotlib itself is imported when a chart is drawn
    from matplotlib.colors import Colormap
    from matplotlib.typing import RcKeyType

# our own palette: ink, paper, grid; home and away; speed bands
INK, PAPER, GRID, MUTED = "#1f2a30", "#fbf8f1", "#ddd6c6", "#6b7479"
SIDE = {"home": "#12706b", "away": "#c8553d"}
# teams told apart by shape as well as colour: marker, line style, bar hatch
SIDE_MARK = {"home": ("o", "-", ""), "away": ("s", (0, (5, 2)), "////")}
BANDS = {"below": "#b9c7bd", "hsr": "#e0a526", "sprint": "#8e3b46"}
MAP_DIST = ("#f6f1e4", "#a9cfb2", "#2f7d6d", "#123535")
MAP_HSR = ("#f6f1e4", "#f0c05a", "#c8553d", "#4f1a26")
HR_ZONE_COLOURS = ("#cfdcd2", "#8fbf9f", "#e0a526", "#c8553d", "#6e2433")  # % HRmax zones, easy to hard

_LOCK = threading.Lock()  # rcParams are process-wide
_PROLOG = re.compile(r"^.*?(?=<svg\b)", re.S)
_META = re.compile(r"<metadata>.*?</metadata>\s*", re.S)


def _style() -> dict[RcKeyType, Any]:
    return {"svg.fonttype": "none", "font.family": "sans-serif", "font.size": 8.0,
            "axes.edgecolor": GRID, "axes.labelcolor": INK, "axes.titlesize": 9.0, "axes.titleweight": "bold",
            "axes.titlelocation": "left", "axes.spines.top": False, "axes.spines.right": False,
            "xtick.color": MUTED, "ytick.color": MUTED, "text.color": INK, "figure.facecolor": PAPER,
            "axes.facecolor": PAPER, "savefig.facecolor": PAPER, "legend.frameon": False, "text.parse_math": False}


def render(name: str, draw: Callable[[Any], None], size: tuple[float, float],
           margins: tuple[float, float, float, float] = (0.6, 0.25, 0.35, 0.45)) -> str:
    """Draw onto a new figure (inches) and return its inline ``<svg>`` element.

    ``margins``: left, right, top, bottom in inches, fixed (a layout engine
    measuring every label costs more than the drawing itself)."""
    import matplotlib
    from matplotlib.backends.backend_svg import FigureCanvasSVG
    from matplotlib.figure import Figure

    with _LOCK, matplotlib.rc_context({**_style(), "svg.hashsalt": f"pacewire-{name}"}):
        w, h = size
        left, right, top, bottom = margins
        fig = Figure(figsize=size)
        fig.subplots_adjust(left=left / w, right=1 - right / w, top=1 - top / h, bottom=bottom / h,
                            wspace=0.25, hspace=0.3)
        draw(fig)
        buf = io.StringIO()
        # matplotlib annotates the canvas, not its print_svg
        FigureCanvasSVG(fig).print_svg(buf, metadata={"Date": None})  # type: ignore[no-untyped-call]
    svg = _META.sub("", _PROLOG.sub("", buf.getvalue(), count=1), count=1)
    return svg.replace("<svg ", f'<svg role="img" aria-label="{name}" class="chart" ', 1)


def _cmap(colours: tuple[str, ...]) -> Colormap:
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("pacewire", colours).with_extremes(bad=PAPER)


LEGEND_PAD = 0.2  # inches of top margin a legend row takes, between the title and the axes


def _legend(ax: Any, ncols: int) -> None:
    """Legend on its own row under the title, left-aligned, clear of the data; the title moves up over it
    (a legend beside a long title overlapped it)."""
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=max(ncols, 1), fontsize=7, borderaxespad=0.15,
              handlelength=2.2, columnspacing=1.2)
    ax.set_title(ax.get_title(loc="left"), loc="left", pad=17)


def block_label(key: str) -> str:
    """``block_0_5`` → ``0-5'``, ``block_45+`` → ``45+'``."""
    body = key.removeprefix("block_")
    return f"{body.replace('_', '-')}'"


def player_label(pid: str, p: dict[str, Any]) -> str:
    return f"{p.get('jersey_number')} {p.get('name') or pid}"


# -- charts ---------------------------------------------------------------------------------------
def team_intensity(series: BlockSeries, teams: list[tuple[str, str, np.ndarray]]) -> str:
    """Outfield distance and HSR per player-minute in each block, per team.
    ``teams``: (team name, side, outfield mask in roster order)."""
    x = np.arange(len(series))
    labels = [block_label(k) for k in series.keys]
    breaks = [i - 0.5 for i in range(1, len(series)) if series.periods[i] != series.periods[i - 1]]

    def draw(fig: Any) -> None:
        top, bottom = fig.subplots(2, 1, sharex=True)
        width = 0.8 / max(len(teams), 1)
        for k, (name, side, mask) in enumerate(teams):
            colour = SIDE.get(side, INK)
            marker, line, hatch = SIDE_MARK.get(side, ("^", ":", ".."))
            top.plot(x, series.group_per_min(ex.DIST, mask), marker=marker, ms=4, lw=1.8, ls=line, color=colour,
                     label=name)
            bottom.bar(x - 0.4 + width * (k + 0.5), series.group_per_min(ex.HSR, mask), width=width * 0.92,
                       color=colour, label=name, hatch=hatch, edgecolor=PAPER if hatch else colour, lw=0)
        top.set_ylabel("distance, m/min")
        bottom.set_ylabel("HSR, m/min")
        top.set_title(f"Outfield, per {series.block_min}-min block")
        for ax in (top, bottom):
            ax.grid(axis="y", color=GRID, lw=0.6)
            for b in breaks:
                ax.axvline(b, color=MUTED, lw=0.8, ls=(0, (3, 3)))
        _legend(top, len(teams))
        bottom.set_xticks(x, labels, rotation=0 if len(x) <= 12 else 45)

    return render("team-intensity", draw, (7.2, 3.8), (0.6, 0.15, 0.3 + LEGEND_PAD, 0.55))


def player_heatmap(series: BlockSeries, rows: list[int], names: list[str], team: str) -> str:
    """Distance and HSR per minute on the pitch, per player (rows) and block (columns)."""
    from matplotlib.ticker import MaxNLocator

    labels = [block_label(k) for k in series.keys]
    dist = series.per_min(ex.DIST)[:, rows].T
    hsr = series.per_min(ex.HSR)[:, rows].T

    def draw(fig: Any) -> None:
        axes = fig.subplots(1, 2, sharey=True)
        panels = ((axes[0], dist, MAP_DIST, "distance, m/min"), (axes[1], hsr, MAP_HSR, "HSR, m/min"))
        for ax, data, cmap, title in panels:
            masked = np.ma.masked_invalid(data)
            top = float(np.nanmax(data)) if np.isfinite(data).any() else 1.0
            mesh = ax.pcolormesh(masked, cmap=_cmap(cmap), vmin=0.0, vmax=max(top, 1e-9), edgecolors=PAPER, lw=0.6)
            ax.set_title(f"{team}: {title}")
            ax.set_xticks(np.arange(len(labels)) + 0.5, labels, rotation=90, fontsize=6.5)
            ax.set_yticks(np.arange(len(names)) + 0.5, names, fontsize=7)
            ax.tick_params(length=0)
            for s in ax.spines.values():
                s.set_visible(False)
            bar = fig.colorbar(mesh, ax=ax, shrink=0.8, pad=0.02, fraction=0.06)
            bar.ax.tick_params(labelsize=6.5)
            bar.locator = MaxNLocator(4)
            bar.update_ticks()
        axes[0].invert_yaxis()  # shared y: once inverts both

    return render(f"heatmap-{team}", draw, (7.2, 0.9 + 0.17 * max(len(rows), 1)), (1.35, 0.3, 0.32, 0.5))


def player_bars(players: list[tuple[str, dict[str, Any]]], team: str) -> str:
    """Distance per player split by speed band: below HSR, HSR, sprint (km)."""
    names = [player_label(pid, p) for pid, p in players]
    hsr = np.array([p["hsr_m"] for _, p in players], float) / 1000
    spr = np.array([p["sprint_m"] for _, p in players], float) / 1000
    below = np.array([p["distance_m"] for _, p in players], float) / 1000 - hsr - spr
    y = np.arange(len(players))

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        ax.barh(y, below, color=BANDS["below"], label="below HSR")
        ax.barh(y, hsr, left=below, color=BANDS["hsr"], label="HSR")
        ax.barh(y, spr, left=below + hsr, color=BANDS["sprint"], label="sprint")
        ax.set_yticks(y, names, fontsize=7)
        ax.invert_yaxis()
        ax.set_xlabel("km")
        ax.grid(axis="x", color=GRID, lw=0.6)
        ax.set_title(f"{team}: distance by speed band")
        _legend(ax, 3)

    return render(f"bars-{team}", draw, (7.2, 0.8 + LEGEND_PAD + 0.17 * max(len(players), 1)),
                  (1.35, 0.15, 0.3 + LEGEND_PAD, 0.4))


def peak_timeline(players: list[tuple[str, dict[str, Any]]], windows: list[int], team: str) -> str:
    """When each player's peak windows happened: a segment from start to end, per window length."""
    names = [player_label(pid, p) for pid, p in players]
    colours = ("#8e3b46", "#e0a526", "#12706b", "#5a6e8c", "#7a5c3e")

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        for k, w in enumerate(windows):
            wins = [(p.get("windows") or {}).get(f"peak_{w}min") for _, p in players]
            rows = [(i, win["start_s"] / 60.0) for i, win in enumerate(wins)
                    if win and win.get("start_s") is not None and win["start_s"] >= 0]
            if not rows:
                continue
            y = np.array([r[0] for r in rows], float) + (k - (len(windows) - 1) / 2) * 0.18
            t0 = np.array([r[1] for r in rows], float)
            ax.hlines(y, t0, t0 + w, colors=colours[k % len(colours)], lw=2.6, label=f"peak {w} min")
        ax.set_yticks(np.arange(len(players)), names, fontsize=7)
        ax.set_ylim(len(players) - 0.5, -0.5)
        ax.set_xlabel("match clock, min")
        ax.grid(axis="x", color=GRID, lw=0.6)
        ax.set_title(f"{team}: when the peak windows happened")
        _legend(ax, len(windows))

    return render(f"peaks-{team}", draw, (7.2, 0.8 + LEGEND_PAD + 0.17 * max(len(players), 1)),
                  (1.35, 0.15, 0.3 + LEGEND_PAD, 0.4))


def possession_split(teams: list[tuple[str, str, dict[str, float]]]) -> str:
    """Outfield distance in possession, out of possession and with the ball out of play (km)."""
    contexts = (("in_possession", "in possession", "#12706b"), ("out_of_possession", "out of possession", "#c8553d"),
                ("out_of_play", "ball out of play", "#b9c7bd"))
    y = np.arange(len(teams))

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        left = np.zeros(len(teams))
        for key, label, colour in contexts:
            vals = np.array([t[2].get(key, 0.0) for t in teams], float) / 1000
            ax.barh(y, vals, left=left, color=colour, label=label)
            left += vals
        ax.set_yticks(y, [t[0] for t in teams])
        ax.invert_yaxis()
        ax.set_xlabel("outfield distance, km")
        ax.grid(axis="x", color=GRID, lw=0.6)
        ax.set_title("Distance by ball context")
        _legend(ax, 3)

    return render("possession", draw, (7.2, 1.6 + LEGEND_PAD), (1.5, 0.15, 0.3 + LEGEND_PAD, 0.45))


def hr_zones(players: list[tuple[str, dict[str, Any]]], zones: list[str], team: str) -> str:
    """Time in each zone of % HRmax per player (minutes, stacked, easy to hard). Players
    without zones (no HRmax, or no heart rate credited) keep their row, empty."""
    names = [player_label(pid, p) for pid, p in players]
    mins = np.array([[((p.get("hr_zones") or {}).get(z) or 0.0) / 60.0 for z in zones] for _, p in players], float)
    y = np.arange(len(players))

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        left = np.zeros(len(players))
        for k, z in enumerate(zones):
            ax.barh(y, mins[:, k], left=left, color=HR_ZONE_COLOURS[k % len(HR_ZONE_COLOURS)], label=z)
            left += mins[:, k]
        ax.set_yticks(y, names, fontsize=7)
        ax.set_ylim(len(players) - 0.5, -0.5)
        ax.set_xlabel("minutes in each zone of % HRmax")
        ax.grid(axis="x", color=GRID, lw=0.6)
        ax.set_title(f"{team}: heart-rate zones")
        _legend(ax, len(zones))

    return render(f"hr-zones-{team}", draw, (7.2, 0.8 + LEGEND_PAD + 0.17 * max(len(players), 1)),
                  (1.35, 0.15, 0.45 + LEGEND_PAD, 0.4))
