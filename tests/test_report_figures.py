"""The report's figures read back from their matplotlib objects: the slices true to scale on
a thin block, names kept off the field, panels that do not crowd each other, and a mark on
every figure of a result that did not converge."""

from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pytest

from sevenfold.errors import SolverError
from sevenfold.export import open_result
from sevenfold.report import draw_probes, draw_residuals, draw_slices
from sevenfold.report_slices import MAX_SPAN, stretch
from sevenfold.runner import run_job

THIN = """
name = "{name}"
physics = "heat"
[grid]
cells = [24, 24, 4]
size = [0.048, 0.048, 0.006]
[material]
value = 5.0
[[material.region]]
sphere = {{ center = [0.024, 0.024, 0.003], radius = 0.0025 }}
value = 400.0
[source]
value = 0.0
[[source.region]]
sphere = {{ center = [0.024, 0.024, 0.003], radius = 0.0025 }}
value = 1.0e7
[boundary]
z_min = {{ type = "robin", coefficient = 2500.0, reference = 300.0 }}
[[patch]]
name = "module"
face = "z_max"
box = {{ min = [0.016, 0.016, 0.006], max = [0.032, 0.032, 0.006] }}
type = "neumann"
total = 5.0
[solver]
method = "{method}"
rtol = {rtol}
max_iterations = {max_iterations}
[output]
path = "results/{{name}}.zarr"
[[probe]]
name = "scan"
line = {{ start = [0.0, 0.024, 0.003], end = [0.048, 0.024, 0.003], points = 9 }}
"""


def thin_result(folder: Path, name: str, method: str = "direct", rtol: float = 1e-8,
                max_iterations: int = 100) -> Path:
    job = folder / f"{name}.toml"
    job.write_text(THIN.format(name=name, method=method, rtol=rtol, max_iterations=max_iterations))
    try:
        return run_job(job).output
    except SolverError as exc:  # stopped short: the result is kept, marked not converged
        return exc.output


@pytest.fixture(scope="module")
def thin(tmp_path_factory) -> Path:
    return thin_result(tmp_path_factory.mktemp("thin"), "thin")


@pytest.fixture
def close_figures():
    yield
    plt.close("all")


def field_axes(fig) -> list:
    return [ax for ax in fig.axes if ax.collections and ax.get_xlabel()]  # the panels, not the colour bar


def test_slices_keep_one_scale_on_a_thin_block(thin: Path, close_figures) -> None:
    """48 x 48 x 6 mm: each panel's drawn width and height stand as its box's sides do, z
    drawn twice as long (8 > MAX_SPAN = 4), as its label says."""
    result = open_result(thin)
    fig = draw_slices(result)
    fig.canvas.draw()
    panels = field_axes(fig)
    assert len(panels) == 3
    extent = [float(np.ptp(result.edges(a))) for a in range(3)]
    s = stretch(extent)
    assert s == (1, 1, 2)
    for ax in panels:
        box = ax.get_window_extent()
        (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
        a, b = ("xyz".index(ax.get_xlabel()[0]), "xyz".index(ax.get_ylabel()[0]))
        assert box.height / box.width == pytest.approx(s[b] * (y1 - y0) / (s[a] * (x1 - x0)), rel=0.02)
        assert ("drawn \u00d72" in ax.get_ylabel()) == (b == 2) and "drawn" not in ax.get_xlabel()
    # the side views (z vertical) are as thin as the block times the stated factor, not
    # stretched to the plan's height
    plan = next(ax for ax in panels if ax.get_ylabel().startswith("y"))
    side = [ax for ax in panels if ax.get_ylabel().startswith("z")]
    for ax in side:
        ratio = ax.get_window_extent().height / plan.get_window_extent().height
        assert ratio == pytest.approx(s[2] * extent[2] / extent[1], rel=0.05)


def test_slices_name_regions_in_a_legend_not_on_the_field(thin: Path, close_figures) -> None:
    fig = draw_slices(open_result(thin))
    panels = field_axes(fig)
    for ax in panels:
        assert not [t.get_text() for t in ax.texts if "module" in t.get_text()]
    legends = [lg for lg in [*fig.legends, *(ax.get_legend() for ax in fig.axes)] if lg is not None]
    names = [t.get_text() for lg in legends for t in lg.get_texts()]
    assert "patch module" in names
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    for lg in legends:  # the legend covers no panel
        assert not any(lg.get_window_extent(renderer).overlaps(ax.get_window_extent()) for ax in panels)


def test_slice_panels_and_their_labels_do_not_crowd_each_other(thin: Path, close_figures) -> None:
    fig = draw_slices(open_result(thin))
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    panels = field_axes(fig)
    for ax in panels:
        whole = ax.get_tightbbox(renderer)  # the panel with its tick labels, axis labels and title
        for other in panels:
            if other is not ax:
                assert not whole.overlaps(other.get_tightbbox(renderer)), (ax.get_title(), other.get_title())


def test_a_very_thin_axis_is_stretched_and_says_so() -> None:
    extent = [0.1, 0.05, 0.1 / (3 * MAX_SPAN)]
    s = stretch(extent)
    assert s[:2] == (1, 1) and s[2] > 1 and max(extent) / (extent[2] * s[2]) <= MAX_SPAN


def test_every_figure_of_a_result_that_did_not_converge_says_so(tmp_path: Path, thin: Path,
                                                                close_figures) -> None:
    short = open_result(thin_result(tmp_path, "short", method="amg", rtol=1e-14, max_iterations=2), warn=False)
    solver = short.attrs["solver"]
    assert not short.converged and solver["stop"] == "max_iterations"
    for draw in (draw_residuals, draw_slices, draw_probes):
        title = draw(short).get_suptitle()
        assert "NOT converged" in title, draw.__name__
        assert solver["stop"] in title and f"{solver['best_relative_residual']:.2e}" in title, draw.__name__
    converged = open_result(thin)
    for draw in (draw_residuals, draw_slices, draw_probes):
        title = draw(converged).get_suptitle()
        assert converged.spec.name in title and "converged" not in title, draw.__name__
