"""Solar geometry and shortwave partitioning on sloping, shaded cells.

Pure functions on float64 arrays, one published method each, plus one compiled kernel that
integrates the sun's geometry over each forcing interval (the model's shortwave is an
interval mean, so the geometry must be one too; otherwise sunrise and sunset hours and a
sunrise behind a ridge come out wrong).

Angles: zenith from the vertical, azimuth from north clockwise, in degrees unless the name
says ``_rad``. Times are UTC.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from regionmap.constants import SOLAR_CONSTANT_W_M2

__all__ = [
    "sun_terms_noaa",
    "hour_angle_deg",
    "solar_position_noaa",
    "extraterrestrial_irradiance_spencer1971",
    "diffuse_fraction_erbs1982",
    "erbs1982_split",
    "tilted_irradiance_liu_jordan1963",
    "cos_incidence_deg",
    "substep_sun_terms",
    "interval_sun_geometry",
]

#: Total solar irradiance [W m-2], Kopp & Lean (2011), GRL 38, L01706,
#: doi:10.1029/2010GL045777.


def _as_datetime64_s(time) -> np.ndarray:
    return np.asarray(time, dtype="datetime64[s]")


def sun_terms_noaa(time) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Declination, equation of time and UTC minutes (NOAA Solar Calculator formulation).

    Parameters
    ----------
    time : array_like datetime64
        UTC instants.

    Returns
    -------
    declination_rad : ndarray float64
        Solar declination (apparent longitude with nutation and aberration, corrected
        obliquity) [rad].
    eot_min : ndarray float64
        Equation of time, apparent minus mean solar time [min].
    minutes_utc : ndarray float64
        Minutes since 00:00 UTC of the instant's day [min].

    Notes
    -----
    Julian century T from the Julian day; geometric mean longitude
    L0 = 280.46646 + T(36000.76983 + 0.0003032 T), mean anomaly
    M = 357.52911 + T(35999.05029 - 0.0001537 T), eccentricity
    e = 0.016708634 - T(0.000042037 + 0.0000001267 T), equation of centre, apparent
    longitude lambda = L0 + C - 0.00569 - 0.00478 sin(125.04 - 1934.136 T), obliquity
    eps = eps0 + 0.00256 cos(125.04 - 1934.136 T); sin(decl) = sin(eps) sin(lambda);
    EoT = 4 deg(y sin 2L0 - 2e sin M + 4ey sin M cos 2L0 - y^2/2 sin 4L0 - 5/4 e^2 sin 2M),
    y = tan^2(eps/2). Accurate to about 0.01 deg against SPA for current dates. Spencer's
    (1971) Fourier series (the NOAA "general solar position" sheet) was tried first and
    misses NREL SPA by up to 0.55 deg at a mid-latitude site (equation of time off by up
    to ~0.8 min), above the 0.3 deg this package requires.

    References
    ----------
    NOAA Global Monitoring Laboratory, Solar Calculator (spreadsheet equations), after
    Meeus, J. (1998). Astronomical Algorithms, 2nd ed., Willmann-Bell, ch. 25 and 28.
    """
    t = _as_datetime64_s(time)
    day = t.astype("datetime64[D]")
    minutes = (t - day.astype("datetime64[s]")).astype(np.float64) / 60.0
    jd = t.astype(np.float64) / 86400.0 + 2440587.5
    jc = (jd - 2451545.0) / 36525.0
    l0 = np.radians(np.mod(280.46646 + jc * (36000.76983 + jc * 0.0003032), 360.0))
    m = np.radians(357.52911 + jc * (35999.05029 - 0.0001537 * jc))
    ecc = 0.016708634 - jc * (0.000042037 + 0.0000001267 * jc)
    centre = (
        np.sin(m) * (1.914602 - jc * (0.004817 + 0.000014 * jc))
        + np.sin(2 * m) * (0.019993 - 0.000101 * jc)
        + np.sin(3 * m) * 0.000289
    )
    omega = np.radians(125.04 - 1934.136 * jc)
    app_long = np.radians(np.degrees(l0) + centre - 0.00569 - 0.00478 * np.sin(omega))
    eps0 = 23.0 + (26.0 + (21.448 - jc * (46.815 + jc * (0.00059 - jc * 0.001813))) / 60.0) / 60.0
    eps = np.radians(eps0 + 0.00256 * np.cos(omega))
    decl = np.arcsin(np.sin(eps) * np.sin(app_long))
    y = np.tan(eps / 2.0) ** 2
    eot = 4.0 * np.degrees(
        y * np.sin(2 * l0)
        - 2 * ecc * np.sin(m)
        + 4 * ecc * y * np.sin(m) * np.cos(2 * l0)
        - 0.5 * y * y * np.sin(4 * l0)
        - 1.25 * ecc * ecc * np.sin(2 * m)
    )
    return decl, eot, minutes


def hour_angle_deg(minutes_utc, eot_min, longitude_deg) -> np.ndarray:
    """Solar hour angle, negative before solar noon.

    Parameters
    ----------
    minutes_utc : array_like float64
        Minutes since 00:00 UTC [min].
    eot_min : array_like float64
        Equation of time [min].
    longitude_deg : array_like float64
        East-positive longitude [deg].

    Returns
    -------
    ndarray float64
        Hour angle [deg]: true solar time / 4 - 180 with true solar time
        = minutes_utc + eot + 4 longitude (NOAA general solar position).
    """
    return (np.asarray(minutes_utc) + eot_min + 4.0 * np.asarray(longitude_deg)) / 4.0 - 180.0


def solar_position_noaa(time, latitude_deg, longitude_deg) -> tuple[np.ndarray, np.ndarray]:
    """Geometric solar zenith and azimuth (NOAA Solar Calculator formulation).

    Parameters
    ----------
    time : array_like datetime64
        UTC instants (broadcast against the coordinates).
    latitude_deg : array_like float64
        Latitude, north positive [deg].
    longitude_deg : array_like float64
        Longitude, east positive [deg].

    Returns
    -------
    zenith_deg : ndarray float64
        Geometric (unrefracted) zenith angle [deg].
    azimuth_deg : ndarray float64
        Azimuth from north, clockwise, in [0, 360) [deg].

    Notes
    -----
    cos(zenith) = sin(lat) sin(decl) + cos(lat) cos(decl) cos(ha);
    azimuth = 180 + atan2(sin ha, cos ha sin lat - tan decl cos lat).
    Declination and equation of time from :func:`sun_terms_noaa`.

    References
    ----------
    NOAA Global Monitoring Laboratory, Solar Calculator equations; Meeus (1998),
    Astronomical Algorithms, 2nd ed.
    """
    decl, eot, minutes = sun_terms_noaa(time)
    ha = np.radians(hour_angle_deg(minutes, eot, longitude_deg))
    lat = np.radians(np.asarray(latitude_deg, dtype=np.float64))
    cosz = np.sin(lat) * np.sin(decl) + np.cos(lat) * np.cos(decl) * np.cos(ha)
    zenith = np.degrees(np.arccos(np.clip(cosz, -1.0, 1.0)))
    az = 180.0 + np.degrees(
        np.arctan2(np.sin(ha), np.cos(ha) * np.sin(lat) - np.tan(decl) * np.cos(lat))
    )
    return zenith, np.mod(az, 360.0)


def extraterrestrial_irradiance_spencer1971(
    day_of_year, solar_constant_w_m2: float = SOLAR_CONSTANT_W_M2
) -> np.ndarray:
    """Extraterrestrial normal irradiance from the Earth-Sun distance (Spencer 1971).

    Parameters
    ----------
    day_of_year : array_like float64
        Day of year, 1 = 1 January [day].
    solar_constant_w_m2 : float
        Total solar irradiance at 1 AU [W m-2]; default 1361 (Kopp & Lean 2011).

    Returns
    -------
    ndarray float64
        Extraterrestrial irradiance normal to the beam [W m-2].

    Notes
    -----
    E0 = 1.000110 + 0.034221 cos G + 0.001280 sin G + 0.000719 cos 2G + 0.000077 sin 2G,
    G = 2 pi (doy - 1) / 365.

    References
    ----------
    Spencer, J. W. (1971). Search 2(5), 172.
    """
    g = 2.0 * np.pi * (np.asarray(day_of_year, dtype=np.float64) - 1.0) / 365.0
    e0 = (
        1.000110
        + 0.034221 * np.cos(g)
        + 0.001280 * np.sin(g)
        + 0.000719 * np.cos(2 * g)
        + 0.000077 * np.sin(2 * g)
    )
    return solar_constant_w_m2 * e0


def diffuse_fraction_erbs1982(kt) -> np.ndarray:
    """Diffuse fraction of global horizontal irradiance from the clearness index.

    Parameters
    ----------
    kt : array_like float64
        Clearness index, global / extraterrestrial horizontal [1].

    Returns
    -------
    ndarray float64
        Diffuse fraction kd [1].

    Notes
    -----
    kd = 1 - 0.09 kt (kt <= 0.22); 0.9511 - 0.1604 kt + 4.388 kt^2 - 16.638 kt^3
    + 12.336 kt^4 (kt <= 0.80); 0.165 above. Eq. 1 of [1].

    References
    ----------
    [1] Erbs, D. G., Klein, S. A. & Duffie, J. A. (1982). Estimation of the diffuse
        radiation fraction for hourly, daily and monthly-average global radiation.
        Solar Energy 28(4), 293-302. doi:10.1016/0038-092X(82)90302-4
    """
    kt = np.asarray(kt, dtype=np.float64)
    poly = 0.9511 - 0.1604 * kt + 4.388 * kt**2 - 16.638 * kt**3 + 12.336 * kt**4
    return np.where(kt <= 0.22, 1.0 - 0.09 * kt, np.where(kt <= 0.8, poly, 0.165))


def erbs1982_split(
    ghi_w_m2,
    zenith_deg,
    extra_w_m2,
    *,
    min_cos_zenith: float = 0.065,
    max_zenith_deg: float = 87.0,
) -> dict[str, np.ndarray]:
    """Split global horizontal irradiance into beam and diffuse (Erbs et al. 1982).

    Parameters
    ----------
    ghi_w_m2 : array_like float64
        Global horizontal irradiance [W m-2].
    zenith_deg : array_like float64
        Solar zenith angle [deg].
    extra_w_m2 : array_like float64
        Extraterrestrial normal irradiance [W m-2].
    min_cos_zenith : float
        Floor on cos(zenith) in the clearness index [1].
    max_zenith_deg : float
        Beyond this zenith the beam is set to zero and all is diffuse [deg].

    Returns
    -------
    dict of ndarray float64
        ``dni`` direct normal [W m-2], ``dhi`` diffuse horizontal [W m-2], ``kt`` [1].

    References
    ----------
    Erbs, Klein & Duffie (1982), Solar Energy 28(4), 293-302, Eq. 1.
    doi:10.1016/0038-092X(82)90302-4
    """
    ghi = np.asarray(ghi_w_m2, dtype=np.float64)
    zen = np.asarray(zenith_deg, dtype=np.float64)
    cosz = np.cos(np.radians(zen))
    kt = np.clip(ghi / (extra_w_m2 * np.maximum(cosz, min_cos_zenith)), 0.0, 1.0)
    dhi = diffuse_fraction_erbs1982(kt) * ghi
    dni = (ghi - dhi) / cosz
    bad = (zen > max_zenith_deg) | (ghi < 0) | (dni < 0)
    return {"dni": np.where(bad, 0.0, dni), "dhi": np.where(bad, ghi, dhi), "kt": kt}


def cos_incidence_deg(zenith_deg, azimuth_deg, slope_deg, aspect_deg) -> np.ndarray:
    """Cosine of the beam's angle of incidence on a plane (may be negative).

    Parameters
    ----------
    zenith_deg, azimuth_deg : array_like float64
        Sun position [deg].
    slope_deg, aspect_deg : array_like float64
        Plane inclination and the direction it faces, 0 = north clockwise [deg].

    Returns
    -------
    ndarray float64
        cos(theta_i) = cos Z cos S + sin Z sin S cos(azimuth - aspect) [1].
    """
    z, a = np.radians(zenith_deg), np.radians(azimuth_deg)
    s, asp = np.radians(slope_deg), np.radians(aspect_deg)
    return np.cos(z) * np.cos(s) + np.sin(z) * np.sin(s) * np.cos(a - asp)


def tilted_irradiance_liu_jordan1963(
    dni_w_m2, dhi_w_m2, ghi_w_m2, cos_incidence, sky_view_frac, albedo_frac
) -> np.ndarray:
    """Total irradiance on a slope with isotropic diffuse sky (Liu & Jordan 1963).

    Parameters
    ----------
    dni_w_m2, dhi_w_m2, ghi_w_m2 : array_like float64
        Direct normal, diffuse horizontal, global horizontal irradiance [W m-2].
    cos_incidence : array_like float64
        Effective cosine of incidence on the slope, already multiplied by the sunlit
        fraction where the horizon shades it; negative values give no beam [1].
    sky_view_frac : array_like float64
        Sky-view factor; (1 + cos S)/2 for an open plane of slope S [1].
    albedo_frac : array_like float64
        Albedo of the surrounding terrain [1].

    Returns
    -------
    ndarray float64
        dni max(cos i, 0) + dhi V + albedo ghi (1 - V) [W m-2].

    References
    ----------
    Liu, B. Y. H. & Jordan, R. C. (1963). The long-term average performance of flat-plate
    solar-energy collectors. Solar Energy 7(2), 53-74. doi:10.1016/0038-092X(63)90006-9
    """
    beam = np.asarray(dni_w_m2) * np.maximum(cos_incidence, 0.0)
    svf = np.asarray(sky_view_frac)
    return beam + np.asarray(dhi_w_m2) * svf + albedo_frac * np.asarray(ghi_w_m2) * (1.0 - svf)


def substep_sun_terms(time_end, dt_s: float, n_sub: int) -> dict[str, np.ndarray]:
    """Time-only solar terms at the midpoints of ``n_sub`` sub-steps of each interval.

    Parameters
    ----------
    time_end : array_like (time,) datetime64
        Interval ends (CF label convention).
    dt_s : float
        Interval length [s].
    n_sub : int
        Sub-steps per interval.

    Returns
    -------
    dict of ndarray (time, n_sub) float64
        ``sin_decl``, ``cos_decl`` [1]; ``sin_ha0``, ``cos_ha0`` of the hour angle at
        longitude 0 [1]; and ``extra_w_m2`` (time,) extraterrestrial irradiance at the
        interval's middle with S0 = 1361 W m-2 [W m-2].
    """
    t_end = _as_datetime64_s(time_end).astype("datetime64[ms]")
    offs_ms = np.rint((np.arange(n_sub) + 0.5) / n_sub * dt_s * 1000.0 - dt_s * 1000.0)
    t_sub = t_end[:, None] + offs_ms.astype("timedelta64[ms]")[None, :]
    decl, eot, minutes = sun_terms_noaa(t_sub.astype("datetime64[s]"))
    # datetime64[s] drops the milliseconds; add them back to the minutes
    minutes = minutes + (t_sub - t_sub.astype("datetime64[s]")).astype(np.float64) / 60000.0
    ha0 = np.radians(hour_angle_deg(minutes, eot, 0.0))
    t_mid = t_end - np.timedelta64(int(dt_s * 500), "ms")
    doy = (
        t_mid.astype("datetime64[D]") - t_mid.astype("datetime64[Y]").astype("datetime64[D]")
    ).astype(np.float64) + 1.0
    return {
        "sin_decl": np.sin(decl),
        "cos_decl": np.cos(decl),
        "sin_ha0": np.sin(ha0),
        "cos_ha0": np.cos(ha0),
        "extra_w_m2": extraterrestrial_irradiance_spencer1971(doy),
    }


@njit(cache=True, nogil=True, error_model="numpy")
def _periodic_index(grid, value, period):
    """Lower bracket index and weight in an ascending periodic grid."""
    n = grid.size
    v = value
    if v < grid[0]:
        v += period
    lo = 0
    hi = n
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if grid[mid] <= v:
            lo = mid
        else:
            hi = mid
    if lo == n - 1:
        span = grid[0] + period - grid[n - 1]
        w = (v - grid[n - 1]) / span if span > 0 else 0.0
        return lo, 0, w
    return lo, lo + 1, (v - grid[lo]) / (grid[lo + 1] - grid[lo])


@njit(cache=True, nogil=True, error_model="numpy")
def _clamped_index(grid, value):
    """Lower bracket index and weight in an ascending grid, clamped at the ends."""
    n = grid.size
    if n == 1 or value <= grid[0]:
        return 0, 0, 0.0
    if value >= grid[n - 1]:
        return n - 1, n - 1, 0.0
    lo = 0
    hi = n - 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if grid[mid] <= value:
            lo = mid
        else:
            hi = mid
    return lo, lo + 1, (value - grid[lo]) / (grid[lo + 1] - grid[lo])


@njit(cache=True, nogil=True, error_model="numpy")
def _interval_geometry_kernel(
    sin_decl,
    cos_decl,
    sin_ha0,
    cos_ha0,
    lat_rad,
    lon_rad,
    az_grid_deg,
    el_grid_deg,
    beam_table,
    out_cosz,
    out_beam,
):
    n_cell = lat_rad.size
    n_t, n_sub = sin_decl.shape
    for c in range(n_cell):
        sphi = np.sin(lat_rad[c])
        cphi = np.cos(lat_rad[c])
        sl = np.sin(lon_rad[c])
        cl = np.cos(lon_rad[c])
        for t in range(n_t):
            acc_z = 0.0
            acc_b = 0.0
            for k in range(n_sub):
                cha = cos_ha0[t, k] * cl - sin_ha0[t, k] * sl
                cosz = sphi * sin_decl[t, k] + cphi * cos_decl[t, k] * cha
                if cosz <= 0.0:
                    continue
                acc_z += cosz
                sha = sin_ha0[t, k] * cl + cos_ha0[t, k] * sl
                az = 180.0 + np.degrees(
                    np.arctan2(sha, cha * sphi - sin_decl[t, k] / cos_decl[t, k] * cphi)
                )
                el = np.degrees(np.arcsin(min(cosz, 1.0)))
                i0, i1, wa = _periodic_index(az_grid_deg, az, 360.0)
                j0, j1, we = _clamped_index(el_grid_deg, el)
                acc_b += (
                    (1.0 - wa) * (1.0 - we) * beam_table[c, i0, j0]
                    + wa * (1.0 - we) * beam_table[c, i1, j0]
                    + (1.0 - wa) * we * beam_table[c, i0, j1]
                    + wa * we * beam_table[c, i1, j1]
                )
            out_cosz[c, t] = acc_z / n_sub
            out_beam[c, t] = acc_b / n_sub
    return 0


def interval_sun_geometry(
    terms: dict[str, np.ndarray],
    latitude_deg: np.ndarray,
    longitude_deg: np.ndarray,
    azimuth_grid_deg: np.ndarray,
    elevation_grid_deg: np.ndarray,
    sunlit_fraction: np.ndarray,
    sunlit_cos_incidence: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Interval means of the sun's horizontal and slope geometry for each cell.

    Parameters
    ----------
    terms : dict
        Output of :func:`substep_sun_terms` for the intervals.
    latitude_deg, longitude_deg : ndarray (cell,) float64
        Cell centroid [deg].
    azimuth_grid_deg : ndarray (n_az,) float64
        Ascending sun azimuths of the sunlit-fraction table, periodic over 360 [deg].
    elevation_grid_deg : ndarray (n_el,) float64
        Ascending sun elevations of the table (values clamped beyond its ends) [deg].
    sunlit_fraction : ndarray (cell, n_az, n_el)
        Share of the cell's pixels in sun [1].
    sunlit_cos_incidence : ndarray (cell, n_az, n_el)
        Mean cosine of incidence of the sunlit pixels [1].

    Returns
    -------
    mean_cos_zenith : ndarray (cell, time) float64
        Interval mean of max(cos Z, 0) for unobstructed horizontal ground [1].
    mean_beam_factor : ndarray (cell, time) float64
        Interval mean of sunlit fraction x cos(incidence) on the cell, bilinear in the
        table at each sub-step's sun position [1].

    Notes
    -----
    With a beam transmittance constant within the interval, the mean beam on the slope is
    B_h x mean_beam_factor / mean_cos_zenith, B_h the mean beam on horizontal ground.
    """
    beam = np.ascontiguousarray(
        np.asarray(sunlit_fraction, dtype=np.float64)
        * np.asarray(sunlit_cos_incidence, dtype=np.float64)
    )
    n_cell, n_t = np.size(latitude_deg), terms["sin_decl"].shape[0]
    out_cosz = np.empty((n_cell, n_t))
    out_beam = np.empty((n_cell, n_t))
    _interval_geometry_kernel(
        np.ascontiguousarray(terms["sin_decl"]),
        np.ascontiguousarray(terms["cos_decl"]),
        np.ascontiguousarray(terms["sin_ha0"]),
        np.ascontiguousarray(terms["cos_ha0"]),
        np.radians(np.asarray(latitude_deg, dtype=np.float64)),
        np.radians(np.asarray(longitude_deg, dtype=np.float64)),
        np.asarray(azimuth_grid_deg, dtype=np.float64),
        np.asarray(elevation_grid_deg, dtype=np.float64),
        beam,
        out_cosz,
        out_beam,
    )
    return out_cosz, out_beam


def slope_shortwave_interval_mean(
    ghi_w_m2: np.ndarray,
    extra_w_m2: np.ndarray,
    mean_cos_zenith: np.ndarray,
    mean_beam_factor: np.ndarray,
    sky_view_frac: np.ndarray,
    albedo_frac: float,
    *,
    min_cos_zenith: float = 0.065,
) -> tuple[np.ndarray, np.ndarray]:
    """Interval-mean shortwave on a shaded slope: Erbs split, then Liu & Jordan transposition.

    Parameters
    ----------
    ghi_w_m2 : ndarray (cell, time) float64
        Interval-mean global horizontal irradiance at the cell [W m-2].
    extra_w_m2 : ndarray (time,) or (cell, time) float64
        Extraterrestrial normal irradiance [W m-2].
    mean_cos_zenith, mean_beam_factor : ndarray (cell, time) float64
        From :func:`interval_sun_geometry` [1].
    sky_view_frac : ndarray (cell,) or (cell, 1) float64
        Sky-view factor of the cell [1].
    albedo_frac : float
        Albedo of the surrounding terrain for the reflected part [1].
    min_cos_zenith : float
        Floor on the mean cos(zenith) in the clearness index, as in Erbs' use by pvlib [1].

    Returns
    -------
    sw_slope_w_m2 : ndarray (cell, time) float64
        Beam (shaded, on the slope) + diffuse x sky view + reflected [W m-2].
    kt : ndarray (cell, time) float64
        Interval clearness index [1] (0 where the sun stays below the horizon).

    Notes
    -----
    kt = GHI / (E0 max(<cos Z>, min_cos_zenith)); kd from Erbs et al. (1982), Eq. 1; mean
    horizontal beam B_h = (1 - kd) GHI, capped so the implied direct normal irradiance
    B_h / <cos Z> does not exceed E0; beam on the slope B_h <f cos i> / <cos Z> (Liu & Jordan
    1963 with the sunlit-fraction table); diffuse (GHI - B_h) V; reflected albedo GHI (1 - V).
    """
    ghi = np.maximum(np.asarray(ghi_w_m2, dtype=np.float64), 0.0)
    up = mean_cos_zenith > 0.0
    i0h = extra_w_m2 * np.maximum(mean_cos_zenith, min_cos_zenith)
    kt = np.where(up, np.clip(ghi / i0h, 0.0, 1.0), 0.0)
    beam_h = np.where(up, (1.0 - diffuse_fraction_erbs1982(kt)) * ghi, 0.0)
    beam_h = np.minimum(beam_h, extra_w_m2 * mean_cos_zenith)
    ratio = np.divide(mean_beam_factor, mean_cos_zenith, out=np.zeros_like(ghi), where=up)
    # Liu & Jordan (1963) with the interval-mean beam on the slope in place of dni cos i
    svf = np.asarray(sky_view_frac, dtype=np.float64)
    sw = beam_h * ratio + (ghi - beam_h) * svf + albedo_frac * ghi * (1.0 - svf)
    return sw, kt
