"""The Shuman smoothers under their own names, their deprecated aliases and smooth()'s return.

Source of the analytic response: Shuman (1957, Mon. Wea. Rev. 85, 357-361; citation from
memory): the three-point smoothing element f* = f + (nu/2)(f[i+1] + f[i-1] - 2 f) multiplies a
wave of wavelength L = m grid lengths by R = 1 - 2 nu sin^2(pi/m).  Derived independently here
with sympy by applying the stencil to exp(i 2 pi x / L).
"""

import warnings

import numpy as np
import pytest
import sympy as sp
import xarray as xr

import qgforce
import qgforce.smoothing as S
from qgforce.errors import InputDataError, OptionError

LAT = np.arange(20.0, 70.1, 1.0)
LON = np.arange(-20.0, 40.1, 1.0)


def _da(values):
    return xr.DataArray(values, dims=("latitude", "longitude"), coords={"latitude": LAT, "longitude": LON})


def _shuman_response(nu, m):
    # sympy: apply the 1-D element to exp(i 2 pi j / m) and divide by the mode
    j, n, mm = sp.symbols("j nu m", real=True)
    mode = sp.exp(sp.I * 2 * sp.pi * j / mm)
    out = mode + n / 2 * (mode.subs(j, j + 1) + mode.subs(j, j - 1) - 2 * mode)
    r = sp.simplify(sp.expand_complex(sp.simplify(out / mode)))
    assert sp.simplify(r - (1 - 2 * n * sp.sin(sp.pi / mm) ** 2)) == 0  # Shuman's closed form
    return float(r.subs({n: nu, mm: m}))


@pytest.mark.parametrize("m", [2, 3, 4, 8])
@pytest.mark.parametrize("element", [0.5, 0.3])
@pytest.mark.parametrize("repeat", [1, 2])
def test_box_response_along_one_axis_is_shuman_element(m, element, repeat):
    # a zonal wave of m grid lengths: the box smoother is the element along x times the element
    # along y, which leaves a field constant in y unchanged
    i = np.arange(LON.size)
    f = np.broadcast_to(np.cos(2 * np.pi * i / m), (LAT.size, LON.size)).copy()
    out = S.shuman_box(_da(f), repeat=repeat, element=element).values
    r = _shuman_response(element, m)
    inner = (slice(repeat, -repeat), slice(repeat, -repeat))
    np.testing.assert_allclose(out[inner], r**repeat * f[inner], rtol=0, atol=1e-13)


@pytest.mark.parametrize("m", [2, 4, 6])
def test_cross_response_along_one_axis_is_shuman_element_of_half_the_element(m):
    # the cross smoother f + (w/4)(sum of 4 sides - 4 f) on a wave along x only is the 1-D element
    # with nu = w/2
    i = np.arange(LON.size)
    f = np.broadcast_to(np.sin(2 * np.pi * i / m + 0.3), (LAT.size, LON.size)).copy()
    out = S.shuman_cross(_da(f), element=0.6).values
    np.testing.assert_allclose(out[1:-1, 1:-1], _shuman_response(0.3, m) * f[1:-1, 1:-1], rtol=0, atol=1e-13)


@pytest.mark.parametrize("mx,my", [(4, 6), (3, 8), (2, 5)])
def test_two_dimensional_response(mx, my):
    # an oblique wave: the box smoother multiplies it by the product of Shuman's element along
    # each axis (nu = w); the cross smoother by the sum of the two half-element (nu = w/2)
    # responses less one (both from the sympy-derived 1-D response above)
    w = 0.5
    j, i = np.meshgrid(np.arange(LAT.size), np.arange(LON.size), indexing="ij")
    f = np.cos(2 * np.pi * i / mx + 2 * np.pi * j / my)
    box = S.shuman_box(_da(f), element=w).values
    cross = S.shuman_cross(_da(f), element=w).values
    r_box = _shuman_response(w, mx) * _shuman_response(w, my)
    r_cross = _shuman_response(w / 2, mx) + _shuman_response(w / 2, my) - 1.0
    inner = (slice(1, -1), slice(1, -1))
    np.testing.assert_allclose(box[inner], r_box * f[inner], rtol=0, atol=1e-13)
    np.testing.assert_allclose(cross[inner], r_cross * f[inner], rtol=0, atol=1e-13)


def test_old_names_warn_and_equal_the_new():
    f = _da(np.random.default_rng(4).normal(size=(LAT.size, LON.size)))
    for old, new in ((S.five_point, S.shuman_cross), (S.nine_point, S.shuman_box)):
        with pytest.warns(DeprecationWarning, match=f"use {new.__name__}"):
            a = old(f, passes=2, weight=0.4)
        b = new(f, repeat=2, element=0.4)
        np.testing.assert_array_equal(a.values, b.values)
        assert b.attrs["qgforce_smoothing"] == f"{new.__name__} repeat=2 element=0.4"
    assert qgforce.shuman_box is S.shuman_box and qgforce.nine_point is S.nine_point


def test_smooth_returns_what_the_filters_return():
    f = _da(np.random.default_rng(5).normal(size=(LAT.size, LON.size)))
    with warnings.catch_warnings():
        warnings.simplefilter("error", DeprecationWarning)  # old spec strings do not warn
        old = S.smooth(f, "nine_point:2")
        new = S.smooth(f, "shuman_box:2")
    assert isinstance(new, xr.DataArray)
    np.testing.assert_array_equal(old.values, new.values)
    out, desc = S.smooth(f, {"method": "shuman_cross", "repeat": 3, "element": 0.25}, describe=True)
    assert desc == out.attrs["qgforce_smoothing"] == "shuman_cross repeat=3 element=0.25"
    assert S.smooth(f, "none") is f and S.smooth(f, None, describe=True) == (f, "none")
    with pytest.raises(InputDataError, match="repeat must be a positive integer"):
        S.smooth(f, "shuman_box:0")
    with pytest.raises(InputDataError, match=r"unknown key\(s\) \['passes'\]"):
        S.smooth(f, {"method": "shuman_box", "passes": 2})
    with pytest.raises(OptionError, match="describe must be True or False"):
        S.smooth(f, None, describe="yes")
