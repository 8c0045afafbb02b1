"""The margin across the variants of a batch: the least-damped ζ (top) and the frequency of that
natural frequency (bottom), one column per variant in the order given, coloured by verdict.

The zero line is where a pair starts to grow; the dashed line is the checks' target damping
ratio. Variants without a located natural frequency leave their column empty. SVG ids:
``trend-zeta``, ``trend-frequency``, ``trend-target``.
"""

from __future__ import annotations

from collections.abc import Sequence

import matplotlib
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter, NullFormatter

from service.reports import style
from service.reports.plot_base import RC, dress, figure
from service.reports.trend import TrendRow

MAX_TICK_LABELS = 40


def trend_figure(rows: Sequence[TrendRow]) -> Figure:
    """ζ and mode frequency across ``rows`` (``trend.trend_rows``), in their order."""
    with matplotlib.rc_context(RC):
        width = max(6.5, min(14.0, 3.0 + 0.22 * len(rows)))
        fig = figure(width, 5.2)
        zeta_ax, freq_ax = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
        for ax in (zeta_ax, freq_ax):
            dress(ax)
        shown = [(k, r) for k, r in enumerate(rows) if r.damping_ratio is not None]
        colours = [style.VERDICT_COLOURS.get(r.state, style.MUTED) for _, r in shown]
        xs = [k for k, _ in shown]
        zeta_ax.plot(xs, [r.damping_ratio for _, r in shown], color=style.RULE, linewidth=1.0,
                     zorder=1)
        dots = zeta_ax.scatter(xs, [r.damping_ratio for _, r in shown], c=colours, s=28,
                               zorder=3, edgecolors=style.INK, linewidths=0.4)
        dots.set_gid("trend-zeta")
        zeta_ax.axhline(0.0, color=style.ALERT, linewidth=1.0, zorder=2)
        targets = sorted({r.target_damping_ratio for r in rows
                          if r.target_damping_ratio is not None})
        for target in targets[:1]:
            line = zeta_ax.axhline(target, color=style.BAND, linewidth=1.2, linestyle=(0, (5, 3)),
                                   zorder=2, label=f"target ζ = {target:g}")
            line.set_gid("trend-target")
            zeta_ax.legend(loc="best", frameon=False)
        zeta_ax.set_ylabel("least-damped ζ  (< 0: grows)")
        zeta_ax.set_title("margin across the variants")
        with_frequency = [(k, r) for k, r in shown if r.frequency_hz and r.frequency_hz > 0]
        marks = freq_ax.scatter([k for k, _ in with_frequency],
                                [r.frequency_hz for _, r in with_frequency],
                                c=[style.VERDICT_COLOURS.get(r.state, style.MUTED)
                                   for _, r in with_frequency],
                                marker="D", s=22, zorder=3, edgecolors=style.INK,
                                linewidths=0.4)
        marks.set_gid("trend-frequency")
        spread = [r.frequency_hz for _, r in with_frequency]
        if spread and max(spread) > 10 * min(spread):  # a decade or more: log, else linear
            freq_ax.set_yscale("log")
        freq_ax.yaxis.set_major_formatter(EngFormatter(unit="Hz", places=0))
        freq_ax.yaxis.set_minor_formatter(NullFormatter())
        freq_ax.set_ylabel("its frequency")
        step = max(1, -(-len(rows) // MAX_TICK_LABELS))
        ticks = list(range(0, len(rows), step))
        freq_ax.set_xticks(ticks, [rows[k].label for k in ticks], rotation=55, ha="right",
                           fontsize=7)
        freq_ax.set_xlim(-0.6, max(len(rows) - 0.4, 0.6))
        return fig
