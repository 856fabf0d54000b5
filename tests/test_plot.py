import numpy as np

from conftest import REPO
from emispec.board import load_board
from emispec.margin import estimate
from emispec.plot import spectrum_figure


def test_spectrum_plot_has_limits_guard_band_sources_and_marks():
    est = estimate(load_board(REPO / "samples" / "beehive-gateway.toml"))
    fig = spectrum_figure(est)
    ax = fig.axes[0]
    labels = [line.get_label() for line in ax.get_lines()]
    assert "limit QP" in labels and "limit QP - 6 dB guard band" in labels
    assert "limit AV" not in labels  # the AV line lies above this board's 1 GHz span
    for clock in est.board.clocks:
        assert any(label.startswith(clock.name) for label in labels)
    marks = next(line for line in ax.get_lines() if line.get_label() == "over the limit")
    assert len(marks.get_xdata()) == est.over_limit
    limit = next(line for line in ax.get_lines() if line.get_label() == "limit QP")
    x, y = limit.get_xdata(), limit.get_ydata()
    assert np.nanmax(y) == 47.0 and np.nanmin(y) == 40.0 and x[0] == 30e6
    assert ax.get_xscale() == "log" and "dBuV/m" in ax.get_ylabel()
    import matplotlib.pyplot as plt

    plt.close(fig)
