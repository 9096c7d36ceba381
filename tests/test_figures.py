"""Figure layout: the fixed margins and the widening for legends beside the axes."""

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402

from floeheat import figures as fig  # noqa: E402


def _with_legend(label: str):
    figure, ax = plt.subplots(figsize=(6, 3))
    ax.plot([0, 1], [0, 1], label=label)
    fig.fixed_margins(figure)
    fig._legend(ax, fontsize=8)
    return figure, ax


def _axes_inches(figure, ax) -> np.ndarray:
    box = ax.get_position()
    w, h = figure.get_size_inches()
    return np.array([box.x0 * w, box.y0 * h, box.width * w, box.height * h])


def test_fixed_margins_are_inches_whatever_the_size():
    for size in ((6, 3), (11, 7)):
        figure, ax = plt.subplots(figsize=size)
        fig.fixed_margins(figure)
        x0, y0, width, height = _axes_inches(figure, ax)
        assert x0 == pytest.approx(fig.MARGINS_IN["left"])
        assert y0 == pytest.approx(fig.MARGINS_IN["bottom"])
        assert size[0] - x0 - width == pytest.approx(fig.MARGINS_IN["right"])
        assert size[1] - y0 - height == pytest.approx(fig.MARGINS_IN["top"])
        plt.close(figure)


@pytest.mark.parametrize("label", ["short", "a much longer legend label " * 3])
def test_the_figure_widens_to_its_legend_and_the_axes_stay_put(label):
    figure, ax = _with_legend(label)
    before = _axes_inches(figure, ax)
    fig.fit_beside_legends(figure, pad_in=0.1)
    renderer = figure.canvas.get_renderer()
    right_px = ax.get_legend().get_window_extent(renderer).x1
    width_px = figure.get_size_inches()[0] * figure.dpi
    # the legend lies inside the figure, with the pad to spare
    assert right_px <= width_px - 0.1 * figure.dpi + 1.0
    assert right_px >= width_px - 0.1 * figure.dpi - 1.0
    np.testing.assert_allclose(_axes_inches(figure, ax), before, atol=1e-9)
    plt.close(figure)


def test_a_figure_without_legend_keeps_its_size():
    figure, ax = plt.subplots(figsize=(6, 3))
    ax.plot([0, 1], [0, 1])
    fig.fit_beside_legends(figure)
    assert tuple(figure.get_size_inches()) == (6.0, 3.0)
    plt.close(figure)


def test_saved_without_crop_the_png_has_the_widened_size(tmp_path):
    figure, _ = _with_legend("radar, 15 km")
    fig.fit_beside_legends(figure)
    w, h = figure.get_size_inches()
    fig.save_figure(figure, tmp_path / "f.png", tight=False)
    image = plt.imread(tmp_path / "f.png")
    # matplotlib rounds the pixel size down or to nearest: within one pixel
    assert abs(image.shape[0] - h * 110) <= 1 and abs(image.shape[1] - w * 110) <= 1
    # something is drawn in the rightmost 15 % (the legend), not a blank margin
    assert (image[:, int(0.85 * image.shape[1]):, :3] < 0.5).any()
