"""Potential temperature (TEOS-10 through gsw, [TEOS10]) against its definition and the UNESCO
1983 check value ([FofonoffMillard1983])."""

from __future__ import annotations

import numpy as np

from obsprep.geo.seawater import potential_temperature


def test_potential_temperature_at_the_reference_pressure_is_the_in_situ_temperature():
    # definition: theta is the temperature of the parcel brought to p_r = 0 dbar
    np.testing.assert_allclose(potential_temperature(35.0, [10.0, -1.5], 0.0, 0.0, 0.0),
                               [10.0, -1.5], atol=1e-9)


def test_potential_temperature_unesco_check_value():
    # UNESCO 1983 (Fofonoff and Millard, check value from memory): S = 40, T = 40 degC,
    # p = 10000 dbar -> theta = 36.89073 degC (IPTS-68); TEOS-10 (ITS-90, Absolute Salinity)
    # differs from EOS-80 by about 0.01 K there (from memory), hence the 0.02 K tolerance
    theta = potential_temperature(40.0, 40.0, 10000.0, 0.0, 0.0)
    assert abs(theta - 36.89073) < 0.02
    # adiabatic cooling on the way up: theta below t in warm deep water (about 0.3 K at
    # 4000 dbar for 2 degC water, from memory)
    cooled = 2.0 - potential_temperature(34.9, 2.0, 4000.0, -20.0, 0.0)
    assert 0.2 < cooled < 0.4
