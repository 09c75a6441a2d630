"""The bundled demo scenario: an invented, developing mid-latitude cyclone.

Everything here is analytic and deterministic (no random numbers).  The scenario is
*invented*: it reproduces no real weather event, place or date.  It is built so that the
QG diagnostics of qgforce have something meaningful to chew on:

* a baroclinic zone concentrated in a sloping frontal band (``tanh`` profile) that leans
  toward the cold air with height, carrying an amplifying, eastward-travelling wave;
* a tropopause that emerges as a smooth maximum of a tropospheric profile of constant
  lapse rate and a nearly isothermal stratosphere whose meridional gradient is reversed,
  so that the thermal wind builds a jet just below it (about 250-300 hPa) and weakens above;
* a jet streak, from a longitudinal strengthening of the frontal contrast upstream of the
  upper trough;
* a 1000-hPa height field with a deepening, travelling low;
* geopotential from the hypsometric equation integrated exactly (Gauss-Legendre quadrature
  in ln p of the analytic temperature), so T and the height are hydrostatically consistent;
* the geostrophic wind of that geopotential with the local Coriolis parameter, plus a weak,
  smooth ageostrophic secondary circulation (low-level convergence into the front,
  divergence aloft);
* specific humidity from a relative-humidity pattern (moist warm sector and the region
  ahead of the trough, dry slot and cold air) times the saturation value of
  Bolton (1980, eq. 10).

The public entry points are :func:`build_demo_dataset` (the dataset in memory),
:func:`demo_path` (where the bundled NetCDF file lives in a source checkout) and
:func:`load_demo` (open the bundled file, or build in memory when it is absent).
The analytic fields themselves are methods of :class:`CycloneScenario`; the instance used
for the bundled file is :data:`DEMO_SCENARIO`.

References
----------
Bolton, D., 1980: The computation of equivalent potential temperature.
    Mon. Wea. Rev., 108, 1046-1053.
Wallace, J. M. and P. V. Hobbs, 2006: Atmospheric Science: An Introductory Survey,
    2nd ed. Academic Press (hypsometric equation, eq. 3.29; humidity variables, sec. 3.5).
Holton, J. R., 2004: An Introduction to Dynamic Meteorology, 4th ed. Academic Press
    (geostrophic and thermal wind, chapter 3).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import xarray as xr

from .constants import (
    DRY_AIR_GAS_CONSTANT,
    EARTH_ANGULAR_VELOCITY,
    EARTH_RADIUS,
    GRAVITY,
    REFERENCE_PRESSURE,
)
from .errors import GridError, InputDataError
from .thermo.formulas import (
    saturation_vapour_pressure,
    specific_humidity_from_vapour_pressure,
)

__all__ = [
    "CycloneScenario",
    "DEMO_SCENARIO",
    "DEMO_LEVELS_HPA",
    "DEMO_HOURS",
    "DEMO_TIME_UNITS",
    "DEMO_VARIABLES",
    "build_demo_dataset",
    "demo_path",
    "load_demo",
]

#: Isobaric levels of the demo [hPa], bottom of the atmosphere first.
DEMO_LEVELS_HPA = (1000.0, 925.0, 850.0, 700.0, 600.0, 500.0, 400.0, 300.0, 250.0, 200.0)

#: Valid times of the demo [hours after the reference time]: 5 times, 6-hourly.
DEMO_HOURS = (0, 6, 12, 18, 24)

#: CF time units of the demo (reference 2046-11-19 00:00 UTC).  The date is invented: it
#: is in the future and belongs to no real event.
DEMO_TIME_UNITS = "hours since 2046-11-19"

#: Names of the data variables in the demo file (CMIP-style short names) and their CF metadata.
DEMO_VARIABLES = {
    "ta": {"standard_name": "air_temperature", "long_name": "air temperature", "units": "K"},
    "zg": {
        "standard_name": "geopotential_height",
        "long_name": "geopotential height (geopotential metres, Z = geopotential / g0)",
        "units": "m",
    },
    "ua": {"standard_name": "eastward_wind", "long_name": "eastward wind", "units": "m s-1"},
    "va": {"standard_name": "northward_wind", "long_name": "northward wind", "units": "m s-1"},
    "hus": {
        "standard_name": "specific_humidity",
        "long_name": "specific humidity",
        "units": "kg kg-1",
    },
}

#: Default horizontal domain of the demo [degrees]: latitude south, north; longitude west, east.
_DOMAIN = (25.0, 70.0, 200.0, 270.0)

#: Step [degrees] of the centred difference that turns the analytic geopotential into its
#: horizontal gradient.  The truncation error (step**2 / 6 times the third derivative) is
#: about 1e-6 of the gradient and the round-off about 1e-9 m s-1 of wind: far below the
#: float32 precision of the stored winds, so the stored wind is the continuous geostrophic wind.
_GRADIENT_STEP_DEG = 1.0e-3


def _softplus(x):
    """log(1 + exp(x)) without overflow (numpy.logaddexp)."""
    return np.logaddexp(0.0, x)


def _chord_squared(lon, lat, lon_centre, lat_centre):
    """Squared chord distance [m2] between points on the sphere of radius a (degrees in).

    r^2 = 2 a^2 (1 - cos gamma), cos gamma = sin phi sin phi_c + cos phi cos phi_c cos(lon - lon_c):
    smooth everywhere (unlike the great-circle distance at r = 0) and equal to the
    great-circle distance squared to relative order gamma^2 / 12.
    """
    phi, phi_c = np.deg2rad(lat), np.deg2rad(lat_centre)
    cos_gamma = np.sin(phi) * np.sin(phi_c) + np.cos(phi) * np.cos(phi_c) * np.cos(
        np.deg2rad(lon - lon_centre)
    )
    return 2.0 * EARTH_RADIUS**2 * (1.0 - cos_gamma)


@dataclasses.dataclass(frozen=True)
class CycloneScenario:
    """Parameters and analytic fields of the invented developing-cyclone scenario.

    All methods broadcast their arguments with numpy rules: longitude and latitude in
    degrees, pressure in Pa, time in hours after the reference time.  Lengths in degrees
    are degrees of latitude or longitude as named.

    Parameters
    ----------
    surface_temperature : float
        Temperature [K] the tropospheric profile reduces to at 1000 hPa at
        ``reference_latitude``, on the front's mean position.
    reference_latitude : float
        Centre [degrees_north] of the broad meridional temperature gradient.
    broad_gradient : float
        Broad, domain-wide meridional temperature gradient [K per degree of latitude].
    front_contrast : float
        Temperature contrast [K] across the frontal band (warm side minus cold side).
    front_latitude : float
        Mean latitude [degrees_north] of the front at 1000 hPa.
    front_slope : float
        Poleward shift of the front per unit of log-pressure height ln(p0/p)
        [degrees of latitude]; the front leans toward the cold air with height.
    front_width : float
        Half-width [degrees of latitude] of the tanh frontal profile at 1000 hPa.
    front_widening : float
        Increase of the half-width per unit of ln(p0/p) [degrees of latitude].
    lapse_rate : float
        Tropospheric lapse rate [K m-1]; the profile is T_sfc (p/p0)^(R_d lapse/g).
    stratosphere_temperature : float
        Stratospheric temperature [K] at 200 hPa and ``stratosphere_latitude``.
    stratosphere_contrast : float
        Half the reversed (poleward-warm) stratospheric meridional contrast [K].
    stratosphere_latitude, stratosphere_width : float
        Centre and half-width [degrees] of the stratospheric tanh gradient.
    stratosphere_warming : float
        Stratospheric warming per unit of ln(p0/p) [K] (about 1.1 K km-1 for 8).
    tropopause_sharpness : float
        Temperature scale [K] of the smooth maximum joining troposphere and stratosphere.
    wavelength : float
        Wavelength of the frontal wave [degrees of longitude].
    wave_amplitude, wave_growth_hours : float
        Meridional displacement of the front [degrees of latitude] at hour 0 and its
        e-folding growth time [h].
    wave_envelope_offset, wave_envelope_width : float
        Centre (relative to the surface low, degrees of longitude) and e-folding half-width
        [degrees of longitude] of the Gaussian envelope of the wave.
    low_longitude, low_latitude : float
        Position [degrees] of the surface low at hour 0.
    low_eastward_speed, low_northward_speed : float
        Drift of the low and of the wave [degrees per hour].
    low_depth, low_deepening : float
        Depth [m] of the Gaussian 1000-hPa height low at hour 0, and its deepening [m h-1].
    low_radius : float
        e-folding radius [m] of the Gaussian low.
    background_height : float
        1000-hPa background height [m] between the ridges.
    subtropical_high, polar_high : tuple of float
        (amplitude [m], centre latitude [degrees_north], e-folding half-width [degrees])
        of the two zonal ridges of the 1000-hPa height.
    warm_amplitude, warm_growth : float
        Warm-sector anomaly [K] at hour 0 and its growth [K h-1]; it lifts the heights
        above the low so that the low weakens with height and the trough aloft lies west.
    warm_offset_lon, warm_offset_lat : float
        Centre of the warm-sector anomaly relative to the low [degrees].
    warm_radius : float
        e-folding radius [m] of the warm-sector anomaly.
    warm_depth : float
        e-folding depth of the warm-sector anomaly in ln(p0/p).
    streak_offset, streak_width, streak_boost : float
        Jet streak: centre relative to the surface low and e-folding half-width
        [degrees of longitude], and fractional strengthening of the frontal contrast.
    ageostrophic_speed : float
        Maximum speed [m s-1] of the ageostrophic secondary circulation.
    ageostrophic_width, ageostrophic_envelope_width : float
        Half-width across the front [degrees of latitude] and e-folding half-width along
        it [degrees of longitude] of that circulation.
    rh_moist_surface, rh_moist_top, rh_dry_surface, rh_dry_top : float
        Relative humidity [1] of the moist region and of the dry air at 1000 and 200 hPa.
    moist_offset, moist_width, moist_edge, moist_edge_width : float
        Moist band: centre on the warm side of the front [degrees of latitude], half-width
        [degrees of latitude], western edge relative to the low [degrees of longitude] and
        its tanh width [degrees of longitude].
    stratosphere_humidity_factor : float
        Factor [1] applied to the relative humidity well above the tropopause.
    """

    surface_temperature: float = 287.5
    reference_latitude: float = 47.5
    broad_gradient: float = 0.4
    front_contrast: float = 10.0
    front_latitude: float = 44.0
    front_slope: float = 8.0
    front_width: float = 3.5
    front_widening: float = 2.0
    lapse_rate: float = 0.007
    stratosphere_temperature: float = 222.0
    stratosphere_contrast: float = 10.0
    stratosphere_latitude: float = 44.0
    stratosphere_width: float = 7.0
    stratosphere_warming: float = 8.0
    tropopause_sharpness: float = 2.0
    wavelength: float = 44.0
    wave_amplitude: float = 2.2
    wave_growth_hours: float = 32.0
    wave_envelope_offset: float = -5.0
    wave_envelope_width: float = 28.0
    low_longitude: float = 220.0
    low_latitude: float = 45.0
    low_eastward_speed: float = 10.0 / 24.0
    low_northward_speed: float = 3.0 / 24.0
    low_depth: float = 80.0
    low_deepening: float = 130.0 / 24.0
    low_radius: float = 9.0e5
    background_height: float = 100.0
    subtropical_high: tuple = (60.0, 30.0, 12.0)
    polar_high: tuple = (90.0, 72.0, 12.0)
    warm_amplitude: float = 1.5
    warm_growth: float = 0.15
    warm_offset_lon: float = 4.0
    warm_offset_lat: float = -2.0
    warm_radius: float = 8.0e5
    warm_depth: float = 1.0
    streak_offset: float = -13.0
    streak_width: float = 12.0
    streak_boost: float = 0.45
    ageostrophic_speed: float = 2.5
    ageostrophic_width: float = 2.5
    ageostrophic_envelope_width: float = 20.0
    rh_moist_surface: float = 0.93
    rh_moist_top: float = 0.68
    rh_dry_surface: float = 0.48
    rh_dry_top: float = 0.30
    moist_offset: float = -1.5
    moist_width: float = 7.0
    moist_edge: float = -3.0
    moist_edge_width: float = 4.0
    stratosphere_humidity_factor: float = 0.05

    # ------------------------------------------------------------------ geometry in time
    def low_position(self, hours):
        """Longitude and latitude [degrees] of the surface low's centre at ``hours``."""
        hours = np.asarray(hours, dtype=float)
        return (
            self.low_longitude + self.low_eastward_speed * hours,
            self.low_latitude + self.low_northward_speed * hours,
        )

    def frontal_latitude(self, lon, pressure, hours):
        """Latitude [degrees_north] of the front's centre line.

        Notes
        -----
        phi_f = phi_0 + s ln(p0/p) + A0 exp(t/tau) E(lon, t) sin(k (lon - lon_L(t))),
        with E a Gaussian envelope travelling with the low.  The front is at its mean
        latitude under the low, displaced poleward (warm crest) a quarter wavelength east
        of it and equatorward (cold trough) a quarter wavelength west.
        """
        lon = np.asarray(lon, dtype=float)
        hours = np.asarray(hours, dtype=float)
        zeta = np.log(REFERENCE_PRESSURE / np.asarray(pressure, dtype=float))
        lon_low, _ = self.low_position(hours)
        envelope = np.exp(
            -(((lon - lon_low - self.wave_envelope_offset) / self.wave_envelope_width) ** 2)
        )
        amplitude = self.wave_amplitude * np.exp(hours / self.wave_growth_hours)
        phase = 2.0 * np.pi * (lon - lon_low) / self.wavelength
        return self.front_latitude + self.front_slope * zeta + amplitude * envelope * np.sin(phase)

    # ------------------------------------------------------------------ temperature
    def _temperature_parts(self, lon, lat, pressure, hours):
        """Tropospheric and stratospheric temperature profiles [K] (see :meth:`temperature`)."""
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        pressure = np.asarray(pressure, dtype=float)
        hours = np.asarray(hours, dtype=float)
        zeta = np.log(REFERENCE_PRESSURE / pressure)
        lon_low, lat_low = self.low_position(hours)
        contrast = self.front_contrast * (
            1.0
            + self.streak_boost
            * np.exp(-(((lon - lon_low - self.streak_offset) / self.streak_width) ** 2))
        )
        width = self.front_width + self.front_widening * zeta
        front = self.frontal_latitude(lon, pressure, hours)
        t_surface = (
            self.surface_temperature
            - self.broad_gradient * (lat - self.reference_latitude)
            - 0.5 * contrast * np.tanh((lat - front) / width)
        )
        exponent = DRY_AIR_GAS_CONSTANT * self.lapse_rate / GRAVITY
        warm = (self.warm_amplitude + self.warm_growth * hours) * np.exp(
            -_chord_squared(lon, lat, lon_low + self.warm_offset_lon, lat_low + self.warm_offset_lat)
            / self.warm_radius**2
            - zeta / self.warm_depth
        )
        t_trop = t_surface * np.exp(-exponent * zeta) + warm
        t_strat = (
            self.stratosphere_temperature
            + self.stratosphere_contrast
            * np.tanh((lat - self.stratosphere_latitude) / self.stratosphere_width)
            + self.stratosphere_warming * (zeta - np.log(5.0))
        )
        return t_trop, t_strat

    def tropospheric_weight(self, lon, lat, pressure, hours):
        """Weight [0..1] of the tropospheric profile in :meth:`temperature` (1 well below the
        tropopause, 0 well above): the logistic derivative of the smooth maximum."""
        t_trop, t_strat = self._temperature_parts(lon, lat, pressure, hours)
        return 0.5 * (1.0 + np.tanh(0.5 * (t_trop - t_strat) / self.tropopause_sharpness))

    def temperature(self, lon, lat, pressure, hours):
        """Air temperature [K].

        Notes
        -----
        Troposphere: T_trop = T_1000(lon, lat, p, t) (p/p0)^(R_d Gamma / g) + T_w with

            T_1000 = T_s - G (lat - lat_r) - (dT(lon, t)/2) tanh((lat - phi_f)/W(p)),

        a constant lapse rate Gamma along the frontal structure (whose shift toward the
        cold air with height only adds stability), and the warm-sector anomaly
        T_w = (A_w + t dA_w/dt) exp(-r_w^2/R_w^2 - ln(p0/p)/d_w) near the low.  Stratosphere:
        T_strat = T_200 + c tanh((lat - lat_s)/w_s) + g_s (ln(p0/p) - ln 5), poleward-warm.
        The two are joined by a smooth maximum (delta the sharpness)

            T = T_strat + delta ln(1 + exp((T_trop - T_strat)/delta)),

        a convex blend of two statically stable profiles, so the column stays stable and
        the tropopause is lower on the cold side.  dT(lon, t) carries the jet streak:
        dT = dT0 (1 + b exp(-((lon - lon_L(t) - o)/w)^2)).
        """
        t_trop, t_strat = self._temperature_parts(lon, lat, pressure, hours)
        delta = self.tropopause_sharpness
        return t_strat + delta * _softplus((t_trop - t_strat) / delta)

    # ------------------------------------------------------------------ heights
    def surface_height(self, lon, lat, hours):
        """Geopotential height [m] of the 1000-hPa surface.

        Notes
        -----
        Z = Z_b + sum_i A_i exp(-((lat - lat_i)/w_i)^2) - D(t) exp(-r^2 / R^2): a
        subtropical and a polar ridge of high pressure (surface westerlies between them,
        easterlies poleward of the polar one), and the Gaussian low, r the chord distance
        to its centre and D(t) = D0 + t dD/dt the deepening depth.
        """
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        hours = np.asarray(hours, dtype=float)
        lon_low, lat_low = self.low_position(hours)
        chord2 = _chord_squared(lon, lat, lon_low, lat_low)
        depth = self.low_depth + self.low_deepening * hours
        background = self.background_height + sum(
            amplitude * np.exp(-(((lat - centre) / width) ** 2))
            for amplitude, centre, width in (self.subtropical_high, self.polar_high)
        )
        return background - depth * np.exp(-chord2 / self.low_radius**2)

    def geopotential(self, lon, lat, levels, hours, *, nodes=8):
        """Geopotential [m2 s-2] on isobaric ``levels`` from the hypsometric equation.

        Parameters
        ----------
        lon, lat : array_like
            Degrees; broadcast with each other and with ``hours``.
        levels : sequence of float
            Pressures [Pa], strictly decreasing, the first one 1000 hPa (where the
            height is given by :meth:`surface_height`).
        hours : array_like
            Time [h].
        nodes : int
            Gauss-Legendre nodes per layer in ln p.

        Returns
        -------
        numpy.ndarray
            The last two axes of ``broadcast(lon, lat, hours)`` are the horizontal ones
            (scalars and 1-D inputs are promoted to 2-D); the level axis is inserted
            before them: shape ``b.shape[:-2] + (len(levels),) + b.shape[-2:]``.

        Raises
        ------
        GridError
            If the levels do not start at 1000 hPa or do not decrease.

        Notes
        -----
        Hypsometric equation (Wallace & Hobbs 2006, eq. 3.29):
        Phi(p_{k+1}) = Phi(p_k) + R_d int_{ln p_{k+1}}^{ln p_k} T d ln p, integrated layer by
        layer with ``nodes``-point Gauss-Legendre quadrature of the analytic T (exact for
        polynomials of degree 2 nodes - 1 in ln p).  The error falls exponentially with the
        node count; with 8 nodes it is below 2e-4 m2 s-2 (2e-5 gpm), fifty times finer than
        the float32 spacing of a stored height near 12 km (1e-3 m).
        """
        levels = np.asarray(levels, dtype=float)
        if levels.ndim != 1 or levels[0] != REFERENCE_PRESSURE or np.any(np.diff(levels) >= 0):
            raise GridError(
                "the demo geopotential needs pressure levels in Pa that start at "
                f"{REFERENCE_PRESSURE:g} Pa and strictly decrease; got {levels!r}. "
                "Pass levels such as [100000., 92500., ...]."
            )
        lon, lat, hours = np.broadcast_arrays(
            np.asarray(lon, dtype=float), np.asarray(lat, dtype=float), np.asarray(hours, dtype=float)
        )
        if lon.ndim < 2:
            lon, lat, hours = (np.atleast_2d(a) for a in (lon, lat, hours))
        x, w = np.polynomial.legendre.leggauss(nodes)
        log_p = np.log(levels)
        bottom, top = log_p[:-1, None], log_p[1:, None]
        half = 0.5 * (bottom - top)  # positive layer half-thickness in ln p
        node_log_p = (0.5 * (bottom + top) + half * x[None, :]).ravel()  # (nlayer * nodes,)
        weights = half * w[None, :]  # (nlayer, nodes)
        # T at every node: shape (..., nlayer * nodes, ny, nx)
        t_nodes = self.temperature(
            lon[..., None, :, :], lat[..., None, :, :], np.exp(node_log_p)[:, None, None], hours[..., None, :, :]
        )
        t_nodes = t_nodes.reshape(t_nodes.shape[:-3] + (levels.size - 1, nodes) + t_nodes.shape[-2:])
        layer_integral = np.einsum("...lnyx,ln->...lyx", t_nodes, weights)
        phi_bottom = GRAVITY * self.surface_height(lon, lat, hours)
        thickness = DRY_AIR_GAS_CONSTANT * np.cumsum(layer_integral, axis=-3)
        return np.concatenate([phi_bottom[..., None, :, :], phi_bottom[..., None, :, :] + thickness], axis=-3)

    def geostrophic_wind(self, lon, lat, levels, hours, *, nodes=8):
        """Geostrophic wind (u_g, v_g) [m s-1] of :meth:`geopotential`, local f.

        Notes
        -----
        u_g = -(1/(f a)) dPhi/dphi, v_g = (1/(f a cos phi)) dPhi/dlambda, f = 2 Omega sin phi
        (Holton 2004, sec. 3.2, written on the sphere).  The derivatives of the analytic Phi
        are taken by a centred difference with a step of 1e-3 degree (relative error about
        1e-6, far below the float32 precision of the stored wind).  Same broadcasting and
        shape rules as :meth:`geopotential`.
        """
        h = _GRADIENT_STEP_DEG
        lon, lat, hours = np.broadcast_arrays(
            np.asarray(lon, dtype=float), np.asarray(lat, dtype=float), np.asarray(hours, dtype=float)
        )

        def phi(dlon, dlat):
            return self.geopotential(lon + dlon, lat + dlat, levels, hours, nodes=nodes)

        step = np.deg2rad(2.0 * h)
        dphi_dlat = (phi(0.0, h) - phi(0.0, -h)) / step
        dphi_dlon = (phi(h, 0.0) - phi(-h, 0.0)) / step
        rad = np.deg2rad(lat)[..., None, :, :]
        f = 2.0 * EARTH_ANGULAR_VELOCITY * np.sin(rad)
        u = -dphi_dlat / (f * EARTH_RADIUS)
        v = dphi_dlon / (f * EARTH_RADIUS * np.cos(rad))
        return u, v

    # ------------------------------------------------------------------ wind, humidity
    def ageostrophic_wind(self, lon, lat, pressure, hours):
        """The ageostrophic secondary circulation (u_a, v_a) [m s-1].

        Notes
        -----
        v_a = -V cos(pi ln(p0/p) / ln 5) tanh((lat - phi_f)/w) E(lon, t), u_a = 0:
        flow toward the front's centre line from both sides below about 450 hPa
        (convergence into the frontal zone), away from it above (divergence aloft),
        confined along the front by a Gaussian envelope E around the low.  |v_a| <= V.
        """
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        pressure = np.asarray(pressure, dtype=float)
        hours = np.asarray(hours, dtype=float)
        zeta = np.log(REFERENCE_PRESSURE / pressure)
        lon_low, _ = self.low_position(hours)
        envelope = np.exp(-(((lon - lon_low) / self.ageostrophic_envelope_width) ** 2))
        front = self.frontal_latitude(lon, pressure, hours)
        v = (
            -self.ageostrophic_speed
            * np.cos(np.pi * zeta / np.log(5.0))
            * np.tanh((lat - front) / self.ageostrophic_width)
            * envelope
        )
        return np.zeros_like(v), v

    def relative_humidity(self, lon, lat, pressure, hours):
        """Relative humidity over liquid water [1], between the dry and moist profiles.

        Notes
        -----
        RH = RH_dry(p) + (RH_moist(p) - RH_dry(p)) M, with both profiles linear in ln p from
        their 1000-hPa to their 200-hPa values, and the moist mask
        M = (1 + tanh((lon - lon_L(t) - e)/w_e))/2 exp(-((lat - phi_f - o)/w)^2):
        the warm sector and the air ahead of the trough along the front are moist; the dry
        slot behind the low and the cold air are dry.  Above the tropopause RH is scaled
        toward ``stratosphere_humidity_factor`` with :meth:`tropospheric_weight`.
        """
        lon = np.asarray(lon, dtype=float)
        lat = np.asarray(lat, dtype=float)
        pressure = np.asarray(pressure, dtype=float)
        hours = np.asarray(hours, dtype=float)
        fraction = np.log(REFERENCE_PRESSURE / pressure) / np.log(5.0)
        moist = self.rh_moist_surface + (self.rh_moist_top - self.rh_moist_surface) * fraction
        dry = self.rh_dry_surface + (self.rh_dry_top - self.rh_dry_surface) * fraction
        lon_low, _ = self.low_position(hours)
        front = self.frontal_latitude(lon, pressure, hours)
        mask = (
            0.5
            * (1.0 + np.tanh((lon - lon_low - self.moist_edge) / self.moist_edge_width))
            * np.exp(-(((lat - front - self.moist_offset) / self.moist_width) ** 2))
        )
        weight = self.tropospheric_weight(lon, lat, pressure, hours)
        stratosphere = weight + (1.0 - weight) * self.stratosphere_humidity_factor
        return (dry + (moist - dry) * mask) * stratosphere

    def specific_humidity(self, lon, lat, pressure, hours):
        """Specific humidity [kg kg-1] = RH times the saturation value (Bolton 1980, eq. 10).

        Notes
        -----
        e = RH e_s(T), e_s = 6.112 exp(17.67 T_c/(T_c + 243.5)) hPa (Bolton 1980, eq. 10),
        q = eps e / (p - (1 - eps) e), both from :mod:`qgforce.thermo.formulas`.
        """
        temperature = self.temperature(lon, lat, pressure, hours)
        vapour = self.relative_humidity(lon, lat, pressure, hours) * saturation_vapour_pressure(temperature)
        return specific_humidity_from_vapour_pressure(vapour, np.asarray(pressure, dtype=float))


#: The scenario of the bundled demo file.
DEMO_SCENARIO = CycloneScenario()


def _coordinate(start, stop, step, name):
    count = (stop - start) / step
    if step <= 0 or abs(count - round(count)) > 1e-9 or round(count) < 4:
        raise GridError(
            f"the demo {name} span {start:g}..{stop:g} degrees must be a whole multiple "
            f"(at least 4) of the resolution; got resolution={step!r}. Use e.g. 1.0, 0.5 or 0.25."
        )
    return np.linspace(start, stop, int(round(count)) + 1)


def build_demo_dataset(*, resolution=1.0, ageostrophic=True, scenario=None):
    """Build the invented developing-cyclone demo dataset in memory.

    Parameters
    ----------
    resolution : float, optional
        Grid spacing [degrees] in latitude and longitude (default 1.0, the bundled file);
        it must divide the 45-degree latitude and 70-degree longitude spans.
    ageostrophic : bool, optional
        Add the weak ageostrophic secondary circulation to the geostrophic wind (default
        True, the bundled file).  False gives the purely geostrophic wind.
    scenario : CycloneScenario, optional
        Parameters of the scenario; default :data:`DEMO_SCENARIO`.

    Returns
    -------
    xarray.Dataset
        Data variables ``ta`` [K], ``zg`` [m], ``ua``, ``va`` [m s-1], ``hus`` [kg kg-1],
        float32, dims (time, plev, lat, lon); ``plev`` in hPa (positive down), ``lat``
        descending from 70 to 25 degrees_north, ``lon`` from 200 to 270 degrees_east,
        ``time`` 5 values 6-hourly (CF units in ``time.encoding``).  CF-1.8 attributes.

    Raises
    ------
    GridError
        If ``resolution`` does not divide the domain.
    InputDataError
        If the built fields contain a non-finite value (a broken scenario).

    Notes
    -----
    Temperature, 1000-hPa height, ageostrophic wind and humidity are analytic
    (:class:`CycloneScenario`).  Geopotential comes from the hypsometric equation
    integrated in ln p with Gauss-Legendre quadrature (Wallace & Hobbs 2006, eq. 3.29)
    and is stored as geopotential height Z = Phi / g0.  The wind is the geostrophic wind of
    the continuous Phi with local f = 2 Omega sin(phi) plus (if ``ageostrophic``) the
    secondary circulation.  Everything is deterministic.

    Examples
    --------
    >>> ds = build_demo_dataset()
    >>> sorted(ds.data_vars)
    ['hus', 'ta', 'ua', 'va', 'zg']
    >>> ds.sizes["plev"], ds.sizes["time"]
    (10, 5)
    """
    scenario = DEMO_SCENARIO if scenario is None else scenario
    south, north, west, east = _DOMAIN
    lat = _coordinate(south, north, resolution, "latitude")[::-1]  # stored descending
    lon = _coordinate(west, east, resolution, "longitude")
    levels_pa = 100.0 * np.asarray(DEMO_LEVELS_HPA)
    hours = np.asarray(DEMO_HOURS, dtype=float)

    lon4 = lon[None, None, None, :]
    lat4 = lat[None, None, :, None]
    p4 = levels_pa[None, :, None, None]
    t4 = hours[:, None, None, None]
    lon3, lat3, t3 = lon4[:, 0], lat4[:, 0], t4[:, 0]  # (time, lat, lon) broadcastable

    temperature = scenario.temperature(lon4, lat4, p4, t4)
    geopotential = scenario.geopotential(lon3, lat3, levels_pa, t3)
    u, v = scenario.geostrophic_wind(lon3, lat3, levels_pa, t3)
    if ageostrophic:
        u_a, v_a = scenario.ageostrophic_wind(lon4, lat4, p4, t4)
        u, v = u + u_a, v + v_a
    humidity = scenario.specific_humidity(lon4, lat4, p4, t4)

    shape = (hours.size, levels_pa.size, lat.size, lon.size)
    fields = {
        "ta": temperature,
        "zg": geopotential / GRAVITY,
        "ua": u,
        "va": v,
        "hus": humidity,
    }
    dims = ("time", "plev", "lat", "lon")
    data_vars = {}
    for name, values in fields.items():
        values = np.broadcast_to(values, shape)
        if not np.all(np.isfinite(values)):
            raise InputDataError(
                f"the demo field {name!r} has non-finite values; expected finite numbers "
                "everywhere. The scenario parameters are broken: restore the defaults."
            )
        data_vars[name] = (dims, values.astype(np.float32), dict(DEMO_VARIABLES[name]))

    reference = np.datetime64(DEMO_TIME_UNITS.split("since ")[1], "ns")
    times = reference + (hours * 3600).astype("timedelta64[s]").astype("timedelta64[ns]")
    coords = {
        "time": ("time", times, {"standard_name": "time", "long_name": "time", "axis": "T"}),
        "plev": (
            "plev",
            np.asarray(DEMO_LEVELS_HPA, dtype=np.float64),
            {
                "standard_name": "air_pressure",
                "long_name": "pressure",
                "units": "hPa",
                "positive": "down",
                "axis": "Z",
            },
        ),
        "lat": (
            "lat",
            lat,
            {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north", "axis": "Y"},
        ),
        "lon": (
            "lon",
            lon,
            {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east", "axis": "X"},
        ),
    }
    ds = xr.Dataset(data_vars, coords=coords, attrs=_global_attributes(resolution, ageostrophic))
    ds["time"].encoding.update({"units": DEMO_TIME_UNITS, "calendar": "standard", "dtype": "int32"})
    return ds


def _global_attributes(resolution, ageostrophic):
    wind = (
        "geostrophic wind of the continuous geopotential with local f = 2 Omega sin(lat), plus a "
        "weak ageostrophic secondary circulation (at most 2.5 m s-1: low-level convergence into "
        "the front, divergence aloft)"
        if ageostrophic
        else "geostrophic wind of the continuous geopotential with local f = 2 Omega sin(lat)"
    )
    return {
        "Conventions": "CF-1.8",
        "title": "qgforce demo: an invented developing mid-latitude cyclone",
        "institution": "qgforce demo (invented data)",
        "source": (
            "analytic scenario from qgforce.scenario.build_demo_dataset "
            f"(grid spacing {resolution:g} degree); no model, no observations"
        ),
        "history": "created by data_demo/make_demo.py from qgforce.scenario (deterministic, no random numbers)",
        "comment": (
            "INVENTED DATA: this scenario reproduces no real event, place or date. "
            "A baroclinic zone in a sloping tanh frontal band (leaning toward the cold air "
            "with height) carries an amplifying, eastward-travelling wave; a tropopause near "
            "250 hPa emerges as a smooth maximum of a constant-lapse-rate troposphere and a "
            "poleward-warm stratosphere; a jet streak comes from a longitudinal strengthening "
            "of the frontal contrast. Geopotential: the 1000-hPa height (a deepening "
            "Gaussian low) plus the hypsometric equation integrated in ln p by Gauss-Legendre "
            "quadrature of the analytic temperature, stored as geopotential height "
            f"(geopotential / {GRAVITY} m s-2). Wind: {wind}. Specific humidity: a "
            "relative-humidity pattern times the saturation value of Bolton (1980, eq. 10)."
        ),
        "references": (
            "Bolton, D., 1980: The computation of equivalent potential temperature. "
            "Mon. Wea. Rev., 108, 1046-1053. Wallace, J. M. and P. V. Hobbs, 2006: "
            "Atmospheric Science, 2nd ed., eq. 3.29."
        ),
        "qgforce_scenario": "invented",
    }


def demo_path():
    """Path of the bundled demo file in a source checkout.

    Returns
    -------
    pathlib.Path
        ``<repository>/data_demo/qgforce_demo.nc``, resolved relative to the installed
        ``qgforce`` package (it exists only in a source or editable install).
    """
    return Path(__file__).resolve().parent.parent / "data_demo" / "qgforce_demo.nc"


def load_demo():
    """Open the bundled demo file, or build the dataset in memory when it is absent.

    Returns
    -------
    xarray.Dataset
        The demo dataset (loaded into memory; the file is closed), identical in values,
        coordinates and attributes whichever way it was obtained.  It is in the file's own
        conventions (hPa, latitude descending, geopotential height), not normalised.
    """
    path = demo_path()
    if path.is_file():
        with xr.open_dataset(path) as ds:
            return ds.load()
    return build_demo_dataset()
