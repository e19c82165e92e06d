"""Seawater conversions: depth <-> sea pressure and the freezing point, all TEOS-10 through
``gsw`` (the reference implementation of the Gibbs SeaWater toolbox).

Source: [TEOS10], *The international thermodynamic equation of seawater -
2010: calculation and use of thermodynamic properties*, Intergovernmental Oceanographic
Commission, Manuals and Guides No. 56 (the TEOS-10 manual).  Depth is positive down, in m;
pressure is sea pressure (absolute pressure minus 10.1325 dbar), in dbar; latitude and
longitude in degrees north and east.  The UNESCO 1983 formulas ([FofonoffMillard1983],
UNESCO Technical Papers in Marine Science 44) are not used; they are only check values.
"""

from __future__ import annotations

import numpy as np


def depth_from_pressure(pressure_dbar, latitude_deg) -> np.ndarray:
    """Depth (m, positive down) from sea pressure (dbar) and latitude (degrees north).

    .. math:: depth = -z(p, \\varphi)

    with z the height (negative in the ocean) from TEOS-10 ``gsw.z_from_p(p, lat)``, which
    solves eq. (3.32.3) of the TEOS-10 manual ([TEOS10] for a standard ocean
    (SA = 35.16504 g/kg, CT = 0 degC) with the 75-term specific volume of Roquet et al.
    (2015, Ocean Modelling 90); no dynamic height or sea-surface geopotential term.  Within
    about 1 m of the UNESCO 1983 formula ([FofonoffMillard1983] at 10 000 dbar.
    """
    import gsw

    return -np.asarray(gsw.z_from_p(pressure_dbar, latitude_deg), dtype=np.float64)


def pressure_from_depth(depth_m, latitude_deg) -> np.ndarray:
    """Sea pressure (dbar) from depth (m, positive down) and latitude (degrees north): the
    inverse of :func:`depth_from_pressure`.

    .. math:: p = p(z = -depth, \\varphi)

    with ``gsw.p_from_z(-depth, lat)`` (eq. 3.32.3 of the TEOS-10 manual solved for p, same
    standard ocean and no geopotential term).
    """
    import gsw

    return np.asarray(gsw.p_from_z(-np.asarray(depth_m, dtype=np.float64), latitude_deg),
                      dtype=np.float64)


def freezing_temperature(practical_salinity, pressure_dbar, lon, lat,
                         saturation_fraction=1.0) -> np.ndarray:
    """In-situ freezing temperature of seawater, degC (ITS-90).

    .. math:: S_A = S_A(S_P, p, \\lambda, \\varphi), \\qquad t_f = t_f(S_A, p, s)

    with ``gsw.SA_from_SP`` (Absolute Salinity from Practical Salinity, g/kg, TEOS-10 manual
    section 2.5) and ``gsw.t_freezing`` (TEOS-10 manual section 3.33, via the polynomial of
    McDougall et al. 2014, Ocean Science 10).  ``pressure_dbar`` is sea pressure,
    ``lon``/``lat`` in degrees, ``saturation_fraction`` s of dissolved air (1: air-saturated,
    usual for seawater; 0: air-free).  For S_P = 40, p = 500 dbar, air-saturated, this is
    within a few mK of the UNESCO 1983 formula (-2.588567 degC).
    """
    import gsw

    absolute_salinity = gsw.SA_from_SP(practical_salinity, pressure_dbar, lon, lat)
    return np.asarray(gsw.t_freezing(absolute_salinity, pressure_dbar, saturation_fraction),
                      dtype=np.float64)


def potential_temperature(practical_salinity, in_situ_temperature, pressure_dbar, lon,
                          lat) -> np.ndarray:
    """Potential temperature (degC, reference sea pressure 0 dbar) of seawater of in-situ
    temperature ``in_situ_temperature`` (degC, ITS-90) at sea pressure ``pressure_dbar``.

    .. math:: S_A = S_A(S_P, p, \\lambda, \\varphi), \\qquad \\theta = \\theta(S_A, t, p, p_r = 0)

    with ``gsw.SA_from_SP`` (TEOS-10 manual section 2.5) and ``gsw.pt0_from_t`` (TEOS-10 manual
    section 3.1, [TEOS10]).  ``lon``/``lat`` in degrees.
    """
    import gsw

    absolute_salinity = gsw.SA_from_SP(practical_salinity, pressure_dbar, lon, lat)
    return np.asarray(gsw.pt0_from_t(absolute_salinity, in_situ_temperature, pressure_dbar),
                      dtype=np.float64)
