"""plot.cross_section with the in-plane circulation (arrows of the along-section wind and −ω)."""

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402

from qgforce import plot  # noqa: E402
from qgforce.errors import InputDataError  # noqa: E402

LEVELS = np.array([100000.0, 85000.0, 70000.0, 50000.0, 30000.0, 20000.0])
LAT = np.arange(-10.0, 10.1, 1.0)
LON = np.arange(-30.0, 30.1, 1.0)


@pytest.fixture(autouse=True)
def _close():
    yield
    plt.close("all")


def field(values_of_p, name, units):
    p = LEVELS[:, None, None] + 0 * LAT[None, :, None] + 0 * LON[None, None, :]
    return xr.DataArray(values_of_p(p), dims=("level", "latitude", "longitude"),
                        coords={"level": LEVELS, "latitude": LAT, "longitude": LON}, name=name,
                        attrs={"units": units, "long_name": name.replace("_", " ")})


def test_circulation_arrows_point_along_the_motion_on_the_figure():
    c, w0 = 12.0, 2e-6  # along-section wind [m/s]; omega = -w0 p, so omega/p is the same at every level
    f = field(lambda p: np.sin(p / 2e4), "omega_total", "Pa s-1")
    u = field(lambda p: c + 0 * p, "u", "m s-1")
    v = field(lambda p: 0 * p, "v", "m s-1")
    om = field(lambda p: -w0 * p, "omega_total", "Pa s-1")
    start, end = (0.0, -20.0), (0.0, 20.0)  # eastward along the equator: the along-section wind is u
    art = plot.cross_section(f, start, end, npoints=41, circulation=(u, v, om))
    q = art.quiver
    assert q is not None and art.quiverkey is not None
    length_m = art.section["distance"].values[-1] * 1000.0
    span = np.log(LEVELS.max() / LEVELS.min())
    k = float(art.quiverkey.text.get_text().split("×")[1].split(")")[0])
    steps = [m * 10.0**e for e in range(10) for m in (1.0, 2.0, 5.0)]
    assert k in steps
    # analytic: dX/dt = u_s / L, dY/dt = -(omega/p) / ln(pmax/pmin), times k: one slope everywhere
    expected = k * (w0 / span) / (c / length_m)
    np.testing.assert_allclose(np.asarray(q.V) / np.asarray(q.U), expected, rtol=1e-6)
    # the default exaggeration makes the vertical part at least a quarter of the horizontal one
    # (and the step below it would not): the ratio of the two parts without exaggeration is expected / k
    assert expected >= 0.25 and (k == 1.0 or steps[steps.index(k) - 1] * expected / k < 0.25)
    # the overlay spans the section axes, so the arrows' screen direction is the figure's
    fig = art.ax.figure
    fig.canvas.draw()
    assert np.allclose(q.axes.get_position().bounds, art.ax.get_position().bounds)
    assert "m s⁻¹" in art.quiverkey.text.get_text()


def test_circulation_where_omega_is_undefined_draws_no_arrow_there():
    f = field(lambda p: np.sin(p / 2e4), "omega_total", "Pa s-1")
    u = field(lambda p: 10.0 + 0 * p, "u", "m s-1")
    v = field(lambda p: 0 * p, "v", "m s-1")
    om = field(lambda p: -1e-6 * p, "omega_total", "Pa s-1").where(lambda a: a.longitude < 0)
    art = plot.cross_section(f, (0.0, -20.0), (0.0, 20.0), npoints=41, circulation=(u, v, om),
                             vertical_exaggeration=1)
    x = np.asarray(art.quiver.X)
    assert x.size and np.all(x <= 0.5 + 1e-9)  # only the western half, where omega is defined
    assert "×1)" in art.quiverkey.text.get_text()


def test_circulation_without_omega_is_horizontal_and_bad_values_are_refused():
    f = field(lambda p: np.sin(p / 2e4), "omega_total", "Pa s-1")
    u = field(lambda p: 10.0 + 0 * p, "u", "m s-1")
    v = field(lambda p: 0 * p, "v", "m s-1")
    art = plot.cross_section(f, (0.0, -20.0), (0.0, 20.0), npoints=41, circulation=(u, v, None))
    assert np.all(np.asarray(art.quiver.V) == 0.0) and "horizontal only" in art.quiverkey.text.get_text()
    with pytest.raises(InputDataError, match="circulation must be a triple"):
        plot.cross_section(f, (0.0, -20.0), (0.0, 20.0), circulation=(u, v))
    with pytest.raises(InputDataError, match="vertical_exaggeration must be a positive"):
        plot.cross_section(f, (0.0, -20.0), (0.0, 20.0), circulation=(u, v, None), vertical_exaggeration=-1)
