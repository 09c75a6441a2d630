"""Shipped geography, fixed per-field levels, one colour meaning, legends and times on maps."""

import importlib.util
import socket
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402

from qgforce import _map_style as MS  # noqa: E402
from qgforce import constants as C  # noqa: E402
from qgforce import geography, plot  # noqa: E402
from qgforce.errors import OptionError  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
LAT = np.arange(30.0, 61.0, 1.0)
LON = np.arange(-30.0, 31.0, 1.0)


@pytest.fixture(autouse=True)
def _close():
    yield
    plt.close("all")


@pytest.fixture
def no_network(tmp_path, monkeypatch):
    """Cartopy with empty data folders; its downloader and any socket connection raise."""
    cartopy = pytest.importorskip("cartopy")
    import cartopy.io

    monkeypatch.setitem(cartopy.config, "data_dir", tmp_path / "d")
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", tmp_path / "p")

    def refuse(*args, **kwargs):
        raise AssertionError("a download was attempted")

    monkeypatch.setattr(cartopy.io.Downloader, "acquire_resource", refuse)
    monkeypatch.setattr(socket.socket, "connect", refuse)


def field(name, units, values, time=None, **coords):
    la, lo = np.meshgrid(LAT, LON, indexing="ij")
    data = values(la, lo) if callable(values) else values
    da = xr.DataArray(data, dims=("latitude", "longitude"), coords={"latitude": LAT, "longitude": LON}, name=name,
                      attrs={"units": units, "long_name": name.replace("_", " ")})
    if time is not None:
        da = da.assign_coords(time=np.datetime64(time, "ns"))
    return da.assign_coords(**coords)


def wave(amplitude):
    return lambda la, lo: amplitude * np.sin(np.deg2rad(6 * lo)) * np.cos(np.deg2rad(3 * (la - 45)))


# ====================================================================== geography data
def test_shipped_layers_are_present_and_in_range():
    for layer in geography.GEOGRAPHY_LAYERS:
        lines = geography.geography_lines(layer, resolution="50m")
        assert len(lines) > 50
        xy = np.concatenate(lines)
        assert np.isfinite(xy).all()
        assert (np.abs(xy[:, 0]) <= 180.0 + 1e-3).all() and (np.abs(xy[:, 1]) <= 90.0).all()
    # more detail at 1:50m than at 1:110m
    n50 = sum(len(p) for p in geography.geography_lines("coastline", resolution="50m"))
    n110 = sum(len(p) for p in geography.geography_lines("coastline", resolution="110m"))
    assert n50 > 5 * n110


def test_coastline_where_land_is_and_none_in_open_ocean():
    # common knowledge: the British Isles lie within 11°W-2°E, 49-61°N; the central North Pacific
    # between 170°W-150°W, 30-40°N holds no land at these scales (Hawaii lies south of 23°N)
    assert geography.geography_lines("coastline", (-11.0, 2.0, 49.0, 61.0), "50m")
    assert not geography.geography_lines("coastline", (-170.0, -150.0, 30.0, 40.0), "50m")
    # US state lines: all within the conterminous states' box (Alaska and Hawaii have no neighbour state)
    xy = np.concatenate(geography.geography_lines("states"))
    assert xy[:, 0].min() > -125.0 and xy[:, 0].max() < -66.0 and xy[:, 1].min() > 24.0 and xy[:, 1].max() < 50.0


def test_lines_are_shifted_into_a_0_to_360_window():
    lines = geography.geography_lines("coastline", (200.0, 270.0, 25.0, 70.0), "50m")
    xy = np.concatenate(lines)
    assert lines and xy[:, 0].max() > 200.0  # the -160..-90 coast appears at 200..270
    same = geography.geography_lines("coastline", (-160.0, -90.0, 25.0, 70.0), "50m")
    assert len(lines) == len(same)


def test_resolution_choice_and_bad_options():
    assert geography.choose_resolution((0, 360, -90, 90)) == "110m"
    assert geography.choose_resolution((-30, 30, 30, 60)) == "50m"
    with pytest.raises(OptionError, match="layer must be one of"):
        geography.geography_lines("rivers")
    with pytest.raises(OptionError, match="resolution must be one of"):
        geography.geography_lines("coastline", resolution="10m")
    with pytest.raises(OptionError, match="lon_min <= lon_max"):
        geography.geography_lines("coastline", (10, 0, 0, 10))


@pytest.mark.skipif(not (ROOT / "tools" / "make_geography.py").exists(), reason="source tree only")
def test_topojson_decoding_against_the_specification_example():
    # TopoJSON specification 1.0, section 2.1.2 (quantized, delta-encoded arcs): with scale (2, 1) and
    # translate (100, 200), the arc [[4, 8], [1, 2], [-1, -4]] decodes to positions
    # (108, 208), (110, 210), (108, 206)
    spec = importlib.util.spec_from_file_location("make_geography", ROOT / "tools" / "make_geography.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    topo = {"transform": {"scale": [2, 1], "translate": [100, 200]}, "arcs": [[[4, 8], [1, 2], [-1, -4]]]}
    np.testing.assert_array_equal(mod.decode_arcs(topo)[0], [[108, 208], [110, 210], [108, 206]])
    assert sorted(mod._arc_indices({"type": "Polygon", "arcs": [[0, ~1]]})) == [0, 1]


# ====================================================================== geography on maps, offline
def test_geoaxes_map_has_shipped_coastlines_without_any_download(no_network):
    from cartopy.mpl.geoaxes import GeoAxes

    da = field("temperature_advection", "K s-1", wave(1e-4))
    art = plot.map_field(da)
    assert isinstance(art.ax, GeoAxes) and type(art.ax.projection).__name__ == "LambertConformal"
    assert art.coastlines is not None and len(art.coastlines.get_segments()) > 10
    art.ax.figure.canvas.draw()  # any download attempt raises
    glob = xr.DataArray(np.ones((45, 90)), dims=("latitude", "longitude"), name="x",
                        coords={"latitude": np.arange(-88.0, 89.0, 4.0), "longitude": np.arange(0.0, 360.0, 4.0)})
    art = plot.map_field(glob)
    assert type(art.ax.projection).__name__ == "PlateCarree" and art.coastlines is not None
    art.ax.figure.canvas.draw()
    seg = np.concatenate(art.coastlines.get_segments())
    # seams are broken: no segment spans more than half the map
    assert all(np.nanmax(np.abs(np.diff(s[:, 0]))) < 180.0 for s in art.coastlines.get_segments() if len(s) > 1)
    assert np.nanmin(seg[:, 0]) < -150.0 and np.nanmax(seg[:, 0]) > 150.0


def test_coastlines_can_be_switched_off():
    art = plot.map_field(field("x", "1", wave(1.0)), projection=False, coastlines=False)
    assert art.coastlines is None and art.geography is None


# ====================================================================== fixed levels and units
def test_temperature_advection_in_kelvin_per_hour_with_the_same_levels_at_every_time():
    weak = field("temperature_advection", "K s-1", wave(2e-5), time="2051-02-03T00")
    strong = field("temperature_advection", "K s-1", wave(3e-4), time="2051-02-03T06")
    a = plot.map_field(weak, projection=False)
    b = plot.map_field(strong, projection=False)
    np.testing.assert_array_equal(a.mesh.levels, b.mesh.levels)
    np.testing.assert_allclose(a.mesh.levels[a.mesh.levels > 0], 0.1 * np.arange(1, 7))
    assert "K h⁻¹" in a.colorbar.ax.get_ylabel()
    # the cells style shows the same display values: SI × 3600 s per hour
    c = plot.map_field(strong, projection=False, style="cells")
    np.testing.assert_allclose(np.asarray(c.mesh.get_array()).reshape(strong.shape), strong.values * 3600.0)
    np.testing.assert_array_equal(c.mesh.norm.boundaries, b.mesh.levels)


def test_frontogenesis_display_factor():
    # K (100 km)-1 (3 h)-1 per K m-1 s-1 = 1e5 m × 10800 s = 1.08e9 (science.md, frontogenesis)
    st = MS.field_style("frontogenesis", "K m-1 s-1")
    assert st.scale == pytest.approx(1e5 * 3 * 3600)
    assert MS.field_style("omega_total", "hPa h-1") is None  # another unit is never rescaled
    # a field converted already (e.g. by qgforce.forcing.to_display_units) is not scaled again
    assert MS.field_style("frontogenesis", "K (100 km)-1 (3 h)-1").scale == 1.0
    assert MS.field_style("temperature_advection", "K d-1") is None


def test_explicit_levels_interval_and_errors():
    da = field("temperature_advection", "K s-1", wave(1e-4))
    art = plot.map_field(da, projection=False, interval=0.25)
    np.testing.assert_allclose(art.mesh.levels[art.mesh.levels > 0], 0.25 * np.arange(1, 7))
    art = plot.map_field(da, projection=False, levels=[-0.3, -0.1, 0.1, 0.3])
    np.testing.assert_allclose(art.mesh.levels, [-0.3, -0.1, 0.1, 0.3])
    art = plot.map_field(field("custom", "m", wave(7.0)), projection=False, interval=2.0)
    assert np.allclose(np.asarray(art.mesh.levels) % 2.0, 0.0)
    assert art.mesh.levels[0] <= -7.0 * 0.99 and art.mesh.levels[-1] >= 7.0 * 0.99
    with pytest.raises(OptionError, match="style must be one of"):
        plot.map_field(da, projection=False, style="raster")
    with pytest.raises(OptionError, match="strictly increasing"):
        plot.map_field(da, projection=False, levels=[1.0, 0.0])
    with pytest.raises(OptionError, match="interval must be a positive number"):
        plot.map_field(da, projection=False, interval=-1)


# ====================================================================== one colour meaning
def test_ascent_and_what_forces_it_share_the_warm_colour():
    forcing = plot.map_field(field("q_vector_forcing", "Pa-1 s-3", wave(2e-17)), projection=False)
    omega = plot.map_field(field("omega_total", "Pa s-1", wave(0.5)), projection=False)
    w = plot.map_field(field("w_total", "m s-1", wave(0.05)), projection=False)

    def colour(art, v):
        return np.asarray(art.mesh.cmap(art.mesh.norm(v)))

    strong_forcing_for_ascent = colour(forcing, 1e3)  # far above the top level
    assert strong_forcing_for_ascent[0] > strong_forcing_for_ascent[2]  # red, not blue
    np.testing.assert_allclose(colour(omega, -1e3), strong_forcing_for_ascent)  # ω < 0 is ascent
    np.testing.assert_allclose(colour(w, 1e3), strong_forcing_for_ascent)  # w > 0 is ascent
    np.testing.assert_allclose(colour(omega, 1e3), colour(forcing, -1e3))


# ====================================================================== legends, keys, time
def test_height_contours_named_and_blank_cells_explained():
    z = field("geopotential", "m2 s-2", lambda la, lo: C.GRAVITY * (5600.0 - 10.0 * (la - 30.0)))
    hours = field("hours_to_saturation", "h", lambda la, lo: np.where(lo > 0, np.nan, 2.0 + (la - 30) / 2))
    hours.attrs["qgforce_lifting_horizon_hours"] = 12.0
    art = plot.map_field(hours, contours=z, projection=False)
    texts = [t.get_text() for t in art.legend.get_texts()]
    assert texts == ["geopotential height, every 6 dam", "blank: not reached within 12 h"]
    assert art.mesh.levels.max() <= 12.0  # no colour beyond the horizon


def test_vector_key_inside_the_panel():
    da = field("q_vector_forcing", "Pa-1 s-3", wave(2e-17))
    u = field("q_vector_x", "m Pa-1 s-3", wave(1e-12))
    v = field("q_vector_y", "m Pa-1 s-3", lambda la, lo: 0 * la + 5e-13)
    art = plot.map_field(da, vectors=(u, v), projection=False)
    fig = art.ax.figure
    fig.canvas.draw()
    box = art.ax.get_window_extent()
    key = art.quiverkey.text.get_window_extent()
    assert box.x0 <= key.x0 and key.x1 <= box.x1 and box.y0 <= key.y0 and key.y1 <= box.y1


def test_time_text_valid_initial_and_lead():
    fmt = plot._format_time
    plain = field("x", "1", wave(1.0), time="2051-02-03T06")
    assert MS.time_text(plain, fmt) == "valid 2051-02-03 06:00 UTC"
    fc = field("x", "1", wave(1.0), time="2051-02-03T00", step=np.timedelta64(18, "h"))
    assert MS.time_text(fc, fmt) == "valid 2051-02-03 18:00 UTC (init 2051-02-03 00:00 UTC, +18 h)"
    vt = field("x", "1", wave(1.0), time="2051-02-03T00", valid_time=np.datetime64("2051-02-04T12", "ns"))
    assert MS.time_text(vt, fmt) == "valid 2051-02-04 12:00 UTC (init 2051-02-03 00:00 UTC, +36 h)"
    assert "valid 2051-02-03 18:00 UTC" in plot.map_field(fc, projection=False).ax.get_title()
    # after qgforce.io.select_realisation: time is the valid time, the initial time forecast_reference_time,
    # the step beside them (it is not added again)
    chosen = field("x", "1", wave(1.0), time="2051-02-03T18", step=np.timedelta64(18, "h"),
                   forecast_reference_time=np.datetime64("2051-02-03T00", "ns"))
    assert MS.time_text(chosen, fmt) == "valid 2051-02-03 18:00 UTC (init 2051-02-03 00:00 UTC, +18 h)"


def test_maps_of_every_step_are_titled_with_their_valid_time(tmp_path, monkeypatch):
    """The maps of --step all: each file name and title give the same valid time and the lead."""
    from qgforce.cli import main

    raw = xr.open_dataset(ROOT / "tests" / "data" / "era5-levels-members-subset.nc").isel(number=0)
    raw = raw.drop_vars(["step", "valid_time"]).load()
    ref = raw["time"].values[0]
    steps = (raw["time"].values - ref).astype("timedelta64[ns]")
    fc = raw.rename({"time": "step"}).assign_coords(step=("step", steps), time=ref, valid_time=("step", ref + steps))
    fc.to_netcdf(tmp_path / "forecast.nc")
    titles = []
    real_save = plot.save_figure

    def keep_title(fig, path, *args, **kwargs):
        titles.append((Path(path).name, " ".join(ax.get_title() for ax in fig.axes)))
        return real_save(fig, path, *args, **kwargs)

    monkeypatch.setattr(plot, "save_figure", keep_title)  # the maps job saves through plot.save_figure
    status = main(["maps", str(tmp_path / "forecast.nc"), "--step", "all", "--output-dir", str(tmp_path / "m"),
                   "--fields", "temperature_advection", "--levels", "500", "--no-summary", "-q"])
    assert status == 0
    got = dict(titles)
    assert "valid 2017-01-01 12:00 UTC (init 2017-01-01 00:00 UTC, +12 h)" in \
        got["temperature_advection_500hPa_20170101T1200.png"]
    assert "valid 2017-01-01 00:00 UTC (init 2017-01-01 00:00 UTC, +0 h)" in \
        got["temperature_advection_500hPa_20170101T0000.png"]


# ====================================================================== summary
def _summary_ds(n_fields):
    names = ["temperature_advection", "differential_vorticity_advection", "thermal_advection_term",
             "q_vector_forcing", "frontogenesis", "omega_total", "hours_to_saturation"][:n_fields]
    units = {"temperature_advection": "K s-1", "frontogenesis": "K m-1 s-1", "omega_total": "Pa s-1",
             "hours_to_saturation": "h"}
    ds = xr.Dataset({n: field(n, units.get(n, "Pa-1 s-3"), wave(1.0)) for n in names})
    ds["hours_to_saturation"] = ds["hours_to_saturation"] * 0 + 5.0 if "hours_to_saturation" in ds else None
    return ds.assign_coords(time=np.datetime64("2051-02-03T06", "ns"))


def test_summary_layout_no_empty_slot_centred_last_row_colour_bars_beside_panels():
    ds = _summary_ds(7)
    fig = plot.summary_figure(ds, projection=False, options={"temperature_advection": {"interval": 0.2}})
    fig.canvas.draw()
    panels = [ax for ax in fig.axes if ax.get_title()]
    assert len(panels) == 7
    assert not [ax for ax in fig.axes if not ax.get_title() and not ax.get_ylabel()]  # nothing empty
    boxes = [ax.get_position() for ax in panels]
    top, bottom = boxes[:4], boxes[4:]
    centre = np.mean([b.x0 + b.x1 for b in bottom]) / 2
    assert centre == pytest.approx(np.mean([b.x0 + b.x1 for b in top]) / 2, abs=0.03)  # last row centred
    for ax in panels:  # each colour bar right beside its own panel
        cax = next(c for c in fig.axes if not c.get_title() and c.get_ylabel() and
                   abs(c.get_position().y0 - ax.get_position().y0) < 0.15 and c.get_position().x0 >= ax.get_position().x1)
        assert cax.get_position().x0 - ax.get_position().x1 < 0.05
    levels = panels[0].collections[0].levels if panels[0].collections else None
    assert levels is not None and np.allclose(np.asarray(levels)[np.asarray(levels) > 0][:2], [0.2, 0.4])
    assert "valid 2051-02-03 06:00 UTC" in fig._suptitle.get_text()
    with pytest.raises(OptionError, match="unknown setting"):
        plot.summary_figure(ds, projection=False, options={"omega_total": {"colour": "red"}})


def _raster(ax_fill, central, lon, lat, values):
    """A filled-contour raster (RGB array) of one Plate Carrée map, drawn by ``ax_fill(ax, ...)``."""
    import cartopy.crs as ccrs

    fig = plt.figure(figsize=(4.0, 2.0), dpi=60)
    ax = fig.add_axes([0, 0, 1, 1], projection=ccrs.PlateCarree(central_longitude=central))
    ax.set_global()
    ax_fill(ax, lon, lat, values)
    ax.set_axis_off()
    fig.canvas.draw()
    rgb = np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(int)
    plt.close(fig)
    return rgb


@pytest.mark.parametrize("central", [180.0, 0.0, -100.0, 37.5])
@pytest.mark.parametrize("lon0", [0.0, -180.0, 1.25])
def test_plate_carree_maps_draw_in_map_coordinates_where_cartopy_would(central, lon0):
    """A global field drawn in the map's own x (no per-polygon projection, the fast path) gives the
    picture cartopy's own transform gives (the reference: cartopy projecting the same contours from
    Plate Carrée), for several central longitudes and grids starting at 0°, −180° and 1.25°; a
    field that is not symmetric in longitude, so a shift of the columns would show."""
    pytest.importorskip("cartopy")
    import cartopy.crs as ccrs

    lon = lon0 + np.arange(144) * 2.5
    lat = np.linspace(-90.0, 90.0, 73)
    lam, phi = np.meshgrid(np.deg2rad(lon), np.deg2rad(lat))
    values = np.sin(lam) * np.cos(phi) + 0.6 * np.cos(2 * lam - 0.5) * np.cos(phi) ** 2 + 0.3 * np.sin(phi)
    levels = np.linspace(-1.6, 1.6, 9)

    def reference(ax, lon, lat, values):
        ax.contourf(lon, lat, values, levels=levels, cmap="RdBu_r", transform=ccrs.PlateCarree())

    def ours(ax, lon, lat, values):
        x, y, v, tkw = plot._native_coords(ax, lon, lat, values, True)
        assert tkw["transform"] is ax.projection  # the map's own coordinates
        assert x[0] == -180.0 and x[-1] == 180.0 and np.all(np.diff(x) > 0)  # the seam filled on both sides
        ax.contourf(x, y, v, levels=levels, cmap="RdBu_r", **tkw)

    a, b = _raster(reference, central, lon, lat, values), _raster(ours, central, lon, lat, values)
    differ = (np.abs(a - b).sum(axis=-1) > 60).mean()
    assert differ < 0.01, differ  # contour edges may move by a pixel; a shifted column would move a third


def test_plate_carree_columns_and_the_seam():
    """x = ((λ − λ0 + 180°) mod 360°) − 180°, increasing; the seam value linear between its two columns."""
    lon = np.array([0.0, 90.0, 180.0, 270.0])
    values = np.array([[0.0, 1.0, 2.0, 3.0]])
    x, v = plot._plate_carree_columns(lon, values, 45.0)
    # columns at −45, 45, 135 (λ = 0, 90, 180) and −135 (λ = 270); the seam at ±180 lies between
    # λ = 180 (x = 135) and λ = 270 (x = −135 + 360 = 225), halfway: 2.5
    np.testing.assert_allclose(x, [-180.0, -135.0, -45.0, 45.0, 135.0, 180.0])
    np.testing.assert_allclose(v, [[2.5, 3.0, 0.0, 1.0, 2.0, 2.5]])
    x, v = plot._plate_carree_columns(lon, values, 45.0, seam=False)  # grid cells: no seam column
    np.testing.assert_allclose(x, [-135.0, -45.0, 45.0, 135.0])
    regional = plot._plate_carree_columns(np.array([160.0, 170.0, 180.0, 190.0]), values, 180.0)
    np.testing.assert_allclose(regional[0], [-20.0, -10.0, 0.0, 10.0])  # not periodic: no seam
    assert plot._plate_carree_columns(np.array([0.0, 0.0, 10.0, 20.0]), values, 0.0) is None
