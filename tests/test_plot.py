import numpy as np

from conftest import REPO
from emispec.board import load_board
from emispec.pipeline import estimate
from emispec.plot import spectrum_figure
from emispec.report import views_of


def test_spectrum_plot_has_limits_guard_band_sources_and_marks():
    est = estimate(load_board(REPO / "samples" / "beehive-gateway.toml"))
    fig = spectrum_figure(est, views_of(est).envelopes)
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


def test_swept_plot_has_each_detector_and_the_limit():
    from emispec.pipeline import swept_spectrum
    from emispec.plot import swept_figure

    est = estimate(load_board(REPO / "samples" / "beehive-gateway.toml"))
    swept = swept_spectrum(est)
    freq, readings = swept["PK"].frequency_hz, {d: trace.level_db for d, trace in swept.items()}
    assert set(readings) == {"PK", "QP", "AV"}
    assert np.all(np.diff(freq) > 0) and freq[0] == est.span_hz[0] and freq[-1] == est.span_hz[1]
    # every unmodulated line is tuned onto exactly
    mcu = [s for s in est.lines if s.name == "mcu_clk"][0]
    assert np.isin(mcu.line_hz[(mcu.line_hz >= 30e6) & (mcu.line_hz <= 1e9)], freq).all()
    # peak >= quasi-peak >= average wherever something is read (detector ordering for any envelope)
    seen = np.isfinite(readings["PK"]) & (readings["PK"] > -50)
    assert np.all(readings["PK"][seen] >= readings["QP"][seen] - 1e-6)
    assert np.all(readings["QP"][seen] >= readings["AV"][seen] - 1e-6)
    fig = swept_figure(est, swept)
    labels = [line.get_label() for line in fig.axes[0].get_lines()]
    assert {"swept PK", "swept QP", "swept AV", "limit QP"} <= set(labels)
    import matplotlib.pyplot as plt

    plt.close(fig)
