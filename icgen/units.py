"""Project units and physical constants, fixed once for the whole package.

Project units
-------------
=====================  =====================================================
quantity               unit
=====================  =====================================================
comoving length        Mpc/h
wavenumber k           h/Mpc
power spectrum P(k)    (Mpc/h)^3
peculiar velocity      km/s
mass                   Msun/h
cosmic time            Gyr (1 Gyr = 1e9 Julian years of 365.25 days)
Hubble rate H(a)       km/s/Mpc
critical density       h^2 Msun / Mpc^3 (physical)
=====================  =====================================================

A name in project units carries no suffix; any other unit is spelled out in the
name (``t_cmb`` is in kelvin, ``softening_kpc_h`` would be in kpc/h).

Growth normalisation: ``D1`` always means the linear growth factor normalised to
D1(a=1) = 1; ``D2`` is normalised consistently, D2 -> -(3/7) D1^2 in
Einstein-de Sitter.

References
----------
.. [1] IAU 2012 Resolution B2 (astronomical unit) and IAU 2015 Resolution B2
       (parsec defined from the au), giving 1 Mpc = 3.0856775814913673e19 km.
.. [2] IAU 2015 Resolution B3: nominal solar mass parameter GM_sun = 1.3271244e20 m^3 s^-2.
.. [3] CODATA 2018 values as shipped in ``scipy.constants`` (G, k_B, hbar, c).
"""

import math

import scipy.constants as _sc

__all__ = [
    "MPC_KM",
    "MPC_M",
    "GYR_S",
    "H0_100_PER_S",
    "HUBBLE_TIME_GYR_H",
    "RHO_CRIT_100",
    "GM_SUN",
    "M_SUN_KG",
    "C_KM_S",
    "OMEGA_GAMMA_H2_PER_T4",
    "NEUTRINO_TO_PHOTON_PER_SPECIES",
]

#: 1 Mpc in km (IAU 2015 B2: 1 pc = 648000/pi au, 1 au = 149597870.7 km).
MPC_KM = 648000.0 / math.pi * 149597870.7 * 1e6
#: 1 Mpc in m.
MPC_M = MPC_KM * 1e3
#: 1 Gyr in s: 1e9 Julian years of 365.25 days of 86400 s.
GYR_S = 1e9 * 365.25 * 86400.0
#: H0 = 100 km/s/Mpc expressed in 1/s.
H0_100_PER_S = 100.0 / MPC_KM
#: The Hubble time 1/(100 km/s/Mpc) in Gyr; divide by h for 1/H0.
HUBBLE_TIME_GYR_H = 1.0 / H0_100_PER_S / GYR_S
#: Speed of light in km/s (exact, SI definition).
C_KM_S = _sc.c / 1e3
#: Nominal solar mass parameter GM_sun in m^3/s^2 (IAU 2015 B3).
GM_SUN = 1.3271244e20
#: Solar mass in kg, GM_sun / G (CODATA G), as astropy.constants.M_sun does.
M_SUN_KG = GM_SUN / _sc.G
#: Critical density for H0 = 100 km/s/Mpc, 3 H0^2 / (8 pi G), in h^2 Msun/Mpc^3.
RHO_CRIT_100 = 3.0 * H0_100_PER_S**2 / (8.0 * math.pi * GM_SUN) * MPC_M**3

# Photon energy density today: rho_gamma c^2 = (pi^2 / 15) (k_B T)^4 / (hbar c)^3
# (Stefan-Boltzmann law for a black body, a = 4 sigma / c); divided by the critical
# density for h = 1 this gives Omega_gamma h^2 = OMEGA_GAMMA_H2_PER_T4 * T^4 (T in K).
_a_rad = 4.0 * _sc.Stefan_Boltzmann / _sc.c  # radiation constant, J m^-3 K^-4
_rho_crit_100_si = 3.0 * H0_100_PER_S**2 / (8.0 * math.pi * _sc.G)  # kg m^-3
#: Omega_gamma h^2 per kelvin^4 of CMB temperature.
OMEGA_GAMMA_H2_PER_T4 = _a_rad / _sc.c**2 / _rho_crit_100_si
#: Energy density of one massless neutrino species relative to the photons,
#: 7/8 (4/11)^(4/3) (instantaneous decoupling; e.g. Weinberg 2008, eq. 3.1.21).
NEUTRINO_TO_PHOTON_PER_SPECIES = 7.0 / 8.0 * (4.0 / 11.0) ** (4.0 / 3.0)
