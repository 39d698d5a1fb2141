"""The demo's figures say what they show (issue 16): units on the axes, every band in the legend."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("matplotlib")

from tovforge.workflows.demo import _plots  # noqa: E402
from tovforge.workflows.demo._observations import load_observations  # noqa: E402


@pytest.fixture
def kept_figures(monkeypatch):
    """The figures the plot functions draw, kept open instead of closed after saving."""
    plt = _plots._pyplot()
    figs = []
    monkeypatch.setattr(plt, "close", lambda fig=None: figs.append(fig))
    yield figs
    monkeypatch.undo()
    for f in figs:
        plt.close(f)


def test_corner_axes_carry_units(tmp_path, kept_figures):
    rng = np.random.default_rng(2)
    bounds = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0]])
    samples = rng.uniform(bounds[:, 0], bounds[:, 1], (3000, 3))
    _plots.corner_plot(tmp_path / "c.png", samples, ["log_p1", "gamma1", "gamma2"], bounds,
                       units=["log10(dyn/cm^2)", "1", "1"])
    fig = kept_figures[-1]
    labels = {ax.get_xlabel() for ax in fig.axes} | {ax.get_ylabel() for ax in fig.axes}
    assert "log_p1 [log10(dyn/cm^2)]" in labels and "gamma2 (dimensionless)" in labels
    assert "log_p1" not in labels  # no bare code name on an axis


def test_mass_radius_legend_names_every_band_and_the_thinning(tmp_path, kept_figures):
    m = np.linspace(1.0, 2.4, 15)
    fraction = np.where(m < 2.15, 1.0, 0.3)
    band = {"mass": m, "fraction": fraction, "radius_median": 12 - 0.5 * m, "radius_p05": 11.5 - 0.5 * m,
            "radius_p95": 12.5 - 0.5 * m, "lambda_median": 1e4 * np.exp(-3 * m), "lambda_p05": 8e3 * np.exp(-3 * m),
            "lambda_p95": 1.2e4 * np.exp(-3 * m)}
    exact = {"mass": m, "n": 300, "median": band["radius_median"], "p05": band["radius_p05"],
             "p95": band["radius_p95"], "emulated_median": band["radius_median"],
             "emulated_p05": band["radius_p05"], "emulated_p95": band["radius_p95"]}
    _plots.band_plot(tmp_path / "b.png", band, exact, load_observations(None))
    fig = kept_figures[-1]
    mr = fig.axes[0]
    texts = [t.get_text() for t in mr.get_legend().get_texts()]
    assert "exact 90 % band, the same 300 samples" in texts
    assert "emulated median and 90 % band, the same 300 samples" in texts
    assert "emulated 90 % band, all samples" in texts
    assert any(t.startswith("above 2.20 Msun: fewer than half of the samples reach M") for t in texts)
