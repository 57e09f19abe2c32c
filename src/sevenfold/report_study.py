"""``convergence.png`` of a grid-convergence study (study.py): the error of each quantity
against cell size, on log axes, with a slope-2 guide.

A quantity whose three finest values converge monotonically is drawn as its distance from the
Richardson-extrapolated value, labelled with its observed order p. An oscillatory one has no
order: it is drawn dotted with open markers as its change from the finest level (no
extrapolated value enters), and its label says "oscillatory, no order".
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .errors import writing

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from .study import Study


def _scale(study: Study, key: str, res) -> float:
    """What a quantity's changes are divided by: the study's scale, else the value's size."""
    if math.isfinite(res.scale) and res.scale > 0:
        return res.scale
    return abs(res.extrapolated) if math.isfinite(res.extrapolated) and res.extrapolated else (
        max(abs(lv.values[key]) for lv in study.levels) or 1.0)


def draw_study(study: Study) -> Figure:
    """The figure: one line per quantity (see the module's docstring)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    hs = np.array([lv.h for lv in study.levels])
    fig, ax = plt.subplots(figsize=(6.4, 4.8), dpi=100, layout="constrained")
    anchors = []  # the finest plotted point of each ordered quantity, for the guide
    for key, res in study.results.items():
        oscillatory = res.convergence == "oscillatory"
        reference = res.f1 if oscillatory else res.extrapolated
        if not math.isfinite(reference):
            continue
        values = np.array([lv.values[key] for lv in study.levels])
        change = np.abs(values - reference) / _scale(study, key, res)
        keep = change > 0
        if keep.sum() < 2:
            continue
        if oscillatory:
            ax.loglog(hs[keep], change[keep], "o:", mfc="white", zorder=3,
                      label=f"{key}: oscillatory, no order (change from the finest level)")
        else:
            (line,) = ax.loglog(hs[keep], change[keep], "o-", label=f"{key} (p = {res.order:.2f})")
            anchors.append(line.get_ydata()[-1])
    if anchors:
        y0 = float(np.median(anchors))
        ax.loglog(hs, y0 * (hs / hs[-1]) ** 2, "k--", lw=1, label="slope 2")
    ax.set_xlabel("cell size h (m)")
    ax.set_ylabel("|f(h) - f_extrapolated| / scale (see study.json)\noscillatory: |f(h) - f_finest| / scale",
                  fontsize=9)
    ax.set_title(f"grid convergence: {study.name}")
    ax.grid(True, which="both", alpha=0.3)
    if ax.get_lines():
        ax.legend(fontsize=7)
    return fig


def plot_study(study: Study, target: str | Path) -> Path:
    """Write :func:`draw_study`'s figure to ``target`` (a PNG)."""
    import matplotlib.pyplot as plt

    target = Path(target)
    fig = draw_study(study)
    try:
        with writing(target, "the figure"):
            fig.savefig(target)
    finally:
        plt.close(fig)
    return target
