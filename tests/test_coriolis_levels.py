"""The one Coriolis default of the API, and forcing terms on any number of levels.

Sources: f = 2Ω sin φ (Holton & Hakim 2013, §2.3); the baroclinic wave's closed forms
(qgforce.cases.baroclinic_wave, verified with sympy in tests/test_cases.py); the default rule is the
project's own (documented in qgforce.kinematics.default_coriolis).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

import qgforce
from qgforce import cases
from qgforce import forcing as F
from qgforce import kinematics as KI
from qgforce.errors import OmittedTermWarning, OptionError, QGForceError
from qgforce.grid import Grid

OMEGA_EARTH = 7.292115e-5  # s-1, IERS value (from memory)


def _sphere(lat, lon=np.arange(0.0, 40.0, 2.0), levels=(85000.0, 70000.0, 50000.0)):
    lat = np.asarray(lat, dtype=float)
    LAT = np.deg2rad(lat)[None, :, None]
    LON = np.deg2rad(lon)[None, None, :]
    P = np.asarray(levels)[:, None, None]
    phi = 9.81 * 1500.0 * np.log(100000.0 / P) * 5 + 4000.0 * np.sin(3 * LON) * np.sin(2 * LAT) * (1 + (100000.0 - P) / 1e5)
    temp = 280.0 - 0.3 * np.abs(np.rad2deg(LAT)) - 40.0 * (1 - P / 1e5) + 2.0 * np.cos(3 * LON + 0.5) + 0 * LON
    return cases.spherical_dataset(lat, lon, levels, {"temperature": temp, "geopotential": phi})


@pytest.mark.parametrize(
    "lat, expected",
    [
        (np.arange(20.0, 71.0, 2.0), "f0"),  # northern, 50° span
        (np.arange(-70.0, -19.0, 2.0), "f0"),  # southern, 50° span
        (np.arange(15.0, 80.0, 2.0), "local"),  # 64° span
        (np.arange(-20.0, 21.0, 2.0), "local"),  # both hemispheres
        (np.arange(-90.0, 91.0, 3.0), "local"),  # global
    ],
)
def test_default_coriolis_rule(lat, expected):
    grid = Grid.from_dataset(_sphere(lat))
    assert KI.default_coriolis(grid) == expected


def test_default_f0_latitude_is_the_cos_weighted_mean():
    lat = np.arange(20.0, 71.0, 2.0)
    grid = Grid.from_dataset(_sphere(lat))
    w = np.cos(np.deg2rad(lat))  # independent: plain numpy, every longitude has the same weight
    assert KI.default_f0_latitude(grid) == pytest.approx(float((w * lat).sum() / w.sum()), abs=1e-9)
    assert KI.default_f0_latitude(grid) < lat.mean()  # the weighting pulls it equatorward of the plain mean


def test_default_f0_latitude_of_the_demo_is_44_1():
    from qgforce.scenario import demo_path, load_demo

    ds = qgforce.open_dataset(demo_path()) if demo_path().is_file() else qgforce.normalize(load_demo())
    assert round(KI.default_f0_latitude(Grid.from_dataset(ds)), 1) == 44.1


def test_none_means_the_rule_everywhere():
    regional = _sphere(np.arange(30.0, 61.0, 2.0))
    z = regional["geopotential"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ug0, _ = KI.geostrophic_wind(z, coriolis="f0")
        ug, _ = KI.geostrophic_wind(z)
        zeta0 = KI.geostrophic_vorticity(z, coriolis="f0")
        zeta = KI.geostrophic_vorticity(z)
    xr.testing.assert_allclose(ug, ug0)
    xr.testing.assert_allclose(zeta, zeta0)
    assert ug.attrs["qgforce_coriolis_rule"] == KI.DEFAULT_CORIOLIS_RULE
    assert ug0.attrs["qgforce_coriolis_rule"] == "requested"
    out = F.temperature_advection(regional)
    assert out.attrs["qgforce_coriolis_rule"] == KI.DEFAULT_CORIOLIS_RULE
    assert out.attrs["qgforce_coriolis"].startswith("f0")

    wide = _sphere(np.arange(-80.0, 81.0, 4.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ugl, _ = KI.geostrophic_wind(wide["geopotential"], coriolis="local")
        ug, _ = KI.geostrophic_wind(wide["geopotential"])
        t = F.temperature_advection(wide)
    xr.testing.assert_allclose(ug, ugl)
    assert t.attrs["qgforce_coriolis"].startswith("local")
    # independent check of local f: v_g = (1/(f a cos φ)) ∂Φ/∂λ with f = 2Ω sin φ, centred differences
    a = 6.371e6
    phi = wide["geopotential"].isel(level=0).values
    lam = np.deg2rad(wide.longitude.values)
    lat = np.deg2rad(wide.latitude.values)[:, None]
    dphidl = (phi[:, 2:] - phi[:, :-2]) / (lam[2:] - lam[:-2])
    with np.errstate(divide="ignore", invalid="ignore"):  # f = 0 on the equator row (not compared)
        vg_ref = dphidl / (2 * OMEGA_EARTH * np.sin(lat) * a * np.cos(lat))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, vg = KI.geostrophic_wind(wide["geopotential"].isel(level=0))
    ok = np.abs(np.rad2deg(lat[:, 0])) > 10
    np.testing.assert_allclose(vg.values[ok, 1:-1], vg_ref[ok], rtol=2e-4)


def test_f0_latitude_across_the_equator_is_an_option_error():
    south = _sphere(np.arange(-70.0, -29.0, 2.0))
    with pytest.raises(OptionError, match="f0_latitude 45 is in the northern hemisphere but the domain lies in the southern"):
        F.q_vectors(south, coriolis="f0", f0_latitude=45.0)
    with pytest.raises(OptionError, match="--f0-latitude"):
        KI.geostrophic_wind(south["geopotential"], f0_latitude=45.0)
    north = _sphere(np.arange(30.0, 61.0, 2.0))
    with pytest.raises(OptionError, match="southern hemisphere but the domain lies in the northern"):
        qgforce.invert_omega(north, f0_latitude=-45.0)
    with pytest.raises(OptionError, match="'local' or 'f0'"):
        KI.resolve_coriolis(Grid.from_dataset(north), "midlatitude")


def test_missing_wind_advice_names_the_real_keyword():
    ds = _sphere(np.arange(30.0, 61.0, 2.0))
    with pytest.raises(QGForceError, match="frontogenesis_wind='geostrophic'"):
        F.forcing_terms(ds)
    with pytest.raises(QGForceError, match="temperature_wind='geostrophic' and frontogenesis_wind='geostrophic'"):
        F.forcing_terms(ds, temperature_wind="full")
    with pytest.raises(QGForceError, match=r"choose wind='geostrophic'"):
        F.temperature_advection(ds, wind="full")
    out = F.forcing_terms(ds, frontogenesis_wind="geostrophic")  # the advice works
    assert "frontogenesis" in out


@pytest.mark.parametrize("fn", [F.forcing_terms, F.temperature_advection, F.q_vectors, F.omega_rhs])
def test_one_calling_convention(fn):
    ds = _sphere(np.arange(30.0, 61.0, 2.0))
    with pytest.raises(TypeError, match="expected an xarray.Dataset holding temperature"):
        fn(ds["temperature"])


# ----------------------------------------------------------------------------- level rules
@pytest.fixture(scope="module")
def wave():
    return cases.baroclinic_wave(n=32, nlev=9)


def test_two_levels_give_per_level_terms_and_the_layer_form(wave):
    ds, opts = wave.ds, {k: v for k, v in wave.options.items() if k != "sigma"}
    pair = ds.isel(level=[2, 6])
    full = F.forcing_terms(ds, frontogenesis_wind="geostrophic", **opts)
    with pytest.warns(OmittedTermWarning, match="differential_vorticity_advection and beta_term: their d/dp needs at least 3"):
        two = F.forcing_terms(pair, frontogenesis_wind="geostrophic", **opts)
    assert "differential_vorticity_advection" not in two and "beta_term" not in two
    assert "needs at least 3 pressure levels" in two.attrs["qgforce_omitted"]
    for name in ("temperature_advection", "vorticity_advection", "q_vector_forcing", "thermal_advection_term",
                 "frontogenesis", "qn_forcing"):
        xr.testing.assert_allclose(two[name], full[name].isel(level=[2, 6]), rtol=1e-12, atol=0)
    # A_η is linear in p in this case, so the layer difference equals the exact −f0 ∂A_η/∂p
    layer = two["layer_differential_vorticity_advection"]
    assert layer.dims == ("y", "x")
    exact = wave.exact["differential_vorticity_advection"].isel(level=0)
    err = float(np.abs(layer - exact).max()) / wave.error_scale("differential_vorticity_advection")
    interior = float(np.abs(layer - exact).isel(x=slice(4, -4), y=slice(4, -4)).max()) / wave.error_scale(
        "differential_vorticity_advection")
    assert interior < 0.02, interior
    assert np.isfinite(err)
    # the same as the public two-level function
    xr.testing.assert_allclose(layer, F.layer_differential_vorticity_advection(
        pair, float(pair.level[0]), float(pair.level[1]), **opts), rtol=1e-12)
    # requested levels: the per-level terms at that level only, the layer still from both
    with pytest.warns(OmittedTermWarning):
        sel = F.forcing_terms(pair, frontogenesis_wind="geostrophic", levels=[float(pair.level[0])], **opts)
    assert sel.sizes["level"] == 1
    xr.testing.assert_allclose(sel["layer_differential_vorticity_advection"], layer)


def test_one_level_gives_per_level_terms(wave):
    ds, opts = wave.ds, {k: v for k, v in wave.options.items() if k != "sigma"}
    single = ds.isel(level=4)
    with pytest.warns(OmittedTermWarning, match="layer_differential_vorticity_advection: needs 2 pressure levels"):
        out = F.forcing_terms(single, frontogenesis_wind="geostrophic", **opts)
    full = F.forcing_terms(ds, frontogenesis_wind="geostrophic", **opts)
    xr.testing.assert_allclose(out["q_vector_forcing"], full["q_vector_forcing"].isel(level=4), rtol=1e-12, atol=0)
    assert "layer_differential_vorticity_advection" not in out


def test_three_levels_omit_nothing(wave):
    ds, opts = wave.ds, {k: v for k, v in wave.options.items() if k != "sigma"}
    with warnings.catch_warnings():
        warnings.simplefilter("error", OmittedTermWarning)
        out = F.forcing_terms(ds.isel(level=[0, 4, 8]), frontogenesis_wind="geostrophic", **opts)
    assert out.attrs["qgforce_omitted"] == "none"
    assert "differential_vorticity_advection" in out and "layer_differential_vorticity_advection" not in out
