"""Samples tables: reading sample files, model values per row, the band, the plot."""

from __future__ import annotations

import numpy as np
import pytest
from table_helpers import tiny_model
from tovforge.errors import InputError
from tovforge.tables import read_samples, read_table, samples_table
from tovforge.tables._samples import band_path

NAMES = ("log_p1", "gamma1", "gamma2", "gamma3")
BOUNDS = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0], [1.5, 4.0]])


def _theta(n, seed=0):
    """Invented samples around a stiff-ish EOS (demo data, not from any analysis)."""
    rng = np.random.default_rng(seed)
    return np.column_stack([rng.uniform(34.2, 34.6, n), rng.uniform(2.6, 3.4, n), rng.uniform(2.6, 3.4, n),
                            rng.uniform(2.6, 3.4, n)])


def _csv(path, header, rows):
    path.write_text("# invented demo samples\n" + ",".join(header) + "\n" + "".join(",".join(r) + "\n" for r in rows))
    return path


def _structured(theta, names=NAMES):
    arr = np.zeros(len(theta), dtype=[(n, "f8") for n in names])
    for j, n in enumerate(names):
        arr[n] = theta[:, j]
    return arr


def test_csv_columns_in_any_order_with_ignored_ones(tmp_path):
    th = _theta(5)
    rows = [[repr(float(r[1])), repr(float(r[0])), "0.5", repr(float(r[3])), repr(float(r[2]))] for r in th]
    s = read_samples(_csv(tmp_path / "s.csv", ["gamma1 [1]", "log_p1", "weight", "gamma3", "gamma2"], rows), NAMES,
                     ignore=["weight"])
    np.testing.assert_array_equal(s.theta, th)
    np.testing.assert_array_equal(s.rows, np.arange(1, 6))
    assert s.bad == ()


def test_npy_structured_array_in_any_field_order(tmp_path):
    th = _theta(4)
    order = ("gamma3", "gamma1", "log_p1", "gamma2")
    np.save(tmp_path / "s.npy", _structured(th[:, [NAMES.index(n) for n in order]], order))
    s = read_samples(tmp_path / "s.npy", NAMES)
    np.testing.assert_array_equal(s.theta, th)


def test_bad_rows_are_reported_by_number_and_the_rest_kept(tmp_path):
    th = _theta(8)
    rows = [[repr(float(v)) for v in r] for r in th]
    rows[1][2] = "nan"                # row 2: NaN
    rows[3] = rows[3][:3]             # row 4: a field short
    rows[4][0] = "abc"                # row 5: not a number
    rows[5][1] = ""                   # row 6: empty
    rows[6][1] = "4.5"                # row 7: outside the box (gamma1 <= 4)
    s = read_samples(_csv(tmp_path / "s.csv", NAMES, rows), NAMES, bounds=BOUNDS)
    assert [r for r, _ in s.bad] == [2, 4, 5, 6, 7]
    reasons = dict(s.bad)
    assert reasons[2].startswith("NaN") and "gamma2" in reasons[2]
    assert reasons[4] == "wrong number of fields: 3 fields, expected 4"
    assert reasons[5] == "not a number: log_p1 = 'abc'"
    assert reasons[6] == "missing value: gamma1 is empty"
    assert reasons[7] == "outside the model's box: gamma1 = 4.5 not in [2, 4]"
    np.testing.assert_array_equal(s.rows, [1, 3, 8])
    np.testing.assert_array_equal(s.theta, th[[0, 2, 7]])
    assert s.n_rows == 8


@pytest.mark.parametrize("header, ignore, match", [
    (["log_p1", "gamma1", "gamma2"], [], "missing column gamma3; the model needs log_p1, gamma1, gamma2, gamma3"),
    (["log_p1", "gamma1", "gamma2", "gamma3", "weight"], [], "extra column weight"),
    (["log_p1", "gamma1", "gamma2", "gamma3", "w", "lnL"], [], "or ignore w,lnL"),
    (["log_p1", "gamma1", "gamma2", "gamma3"], ["weight"], "ignore weight: "),
    (["log_p1", "gamma1", "gamma1", "gamma3"], [], "column 'gamma1' appears twice"),
])
def test_column_problems_name_the_columns(tmp_path, header, ignore, match):
    path = _csv(tmp_path / "s.csv", header, [["1"] * len(header)])
    with pytest.raises(InputError, match=match):
        read_samples(path, NAMES, ignore=ignore)


def test_plain_npy_is_refused_with_the_fix(tmp_path):
    np.save(tmp_path / "s.npy", _theta(3))
    with pytest.raises(InputError, match="plain array has no column names; save a structured array"):
        read_samples(tmp_path / "s.npy", NAMES)


def test_other_extensions_are_refused(tmp_path):
    (tmp_path / "s.txt").write_text("log_p1\n")
    with pytest.raises(InputError, match="must be a .csv or a .npy"):
        read_samples(tmp_path / "s.txt", NAMES)


@pytest.fixture(scope="module")
def samples_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("samples")
    th = _theta(60, seed=1)
    rows = [[repr(float(v)) for v in r] for r in th]
    rows[9][0] = "nan"
    path = _csv(tmp / "post.csv", NAMES, rows)
    model = tiny_model("spline")
    summary = samples_table(tmp / "post.h5", model, path, masses=[1.2, 1.4, 2.2], plot=tmp / "mr.png",
                            progress=False, chunk_rows=16, command="test")
    return summary, model, th, tmp


def test_samples_table_holds_the_model_values(samples_run):
    summary, model, th, tmp = samples_run
    t = read_table(tmp / "post.h5")
    keep = np.r_[0:9, 10:60]
    np.testing.assert_array_equal(t["sample"], keep + 1)
    theta = th[keep]
    np.testing.assert_array_equal(np.stack([t[n] for n in NAMES], axis=1), theta)
    np.testing.assert_allclose(t["mass_max"], model.mass_max(theta).value, rtol=1e-12)
    for name, method in (("radius", model.radius), ("lambda", model.tidal_deformability),
                         ("inertia", model.moment_of_inertia)):
        ref = method(theta, [1.2, 1.4, 2.2]).value
        for j, m in enumerate(["1.2", "1.4", "2.2"]):
            np.testing.assert_allclose(t[f"{name}@{m}"], ref[:, j], rtol=1e-12)
    assert summary.skipped == ((10, "NaN or infinite value: log_p1 = nan"),)
    assert summary.error.startswith(f"{tmp / 'post.csv'}: 1 of 60 rows left out") and "in row 10 (" in summary.error
    assert t.meta["samples_rows"] == 60 and t.meta["samples_skipped"] == 1


def test_band_is_the_median_and_90_percent_interval(samples_run):
    summary, model, th, tmp = samples_run
    t = read_table(tmp / "post.h5")
    band = read_table(band_path(tmp / "post.h5"))
    np.testing.assert_array_equal(band["mass"], [1.2, 1.4, 2.2])
    for j, m in enumerate(["1.2", "1.4", "2.2"]):
        for q in ("radius", "lambda", "inertia"):
            v = t[f"{q}@{m}"]
            v = v[np.isfinite(v)]
            assert band[f"{q}_median"][j] == pytest.approx(np.median(v), rel=1e-14)
            assert band[f"{q}_p05"][j] == pytest.approx(np.percentile(v, 5), rel=1e-14)
            assert band[f"{q}_p95"][j] == pytest.approx(np.percentile(v, 95), rel=1e-14)
        assert band["fraction"][j] == np.mean(t["mass_max"] >= float(m))
    assert 0 < band["fraction"][2] < 1  # 2.2 Msun is beyond some samples' M_max
    assert band.meta["mass_max_median"] == pytest.approx(np.median(t["mass_max"]), rel=1e-14)
    assert band.meta["kind"] == "band" and band.meta["command"] == "test"


def test_plot_is_a_png(samples_run):
    _, _, _, tmp = samples_run
    assert (tmp / "mr.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_band_path():
    assert band_path("a/post.csv").as_posix() == "a/post.band.csv"


def test_plot_says_how_many_samples_reach_each_mass(tmp_path, monkeypatch):
    """Issue 16: above ~1.8 Msun the band covers only the samples whose M_max exceeds the mass, silently."""
    import matplotlib.pyplot as plt

    from tovforge.tables._samples import _plot_band

    kept = []
    monkeypatch.setattr(plt, "close", lambda fig=None: kept.append(fig))
    model = tiny_model("spline")
    th = _theta(60, seed=1)
    _plot_band(tmp_path / "p.png", model, th, [1.2, 1.4], None, "test", overwrite=False)
    monkeypatch.undo()
    fig = kept[-1]
    share = next(ax for ax in fig.axes if "samples with a star of mass M" in ax.get_xlabel())
    x, y = share.lines[0].get_data()
    mm = model.mass_max(th).value
    j = len(y) // 2
    assert x[j] == pytest.approx(100.0 * np.mean(mm >= y[j]), abs=1e-9)  # the share drawn is the share reaching M
    plt.close(fig)
