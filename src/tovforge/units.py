"""Physical constants and unit conversions used at the edges of tovforge.

Inside the solver everything is in geometrised units (G = c = 1) with lengths
in km: masses are lengths (km), pressures and energy densities are km^-2.
Conversions to astronomers' units happen only here and at the API edges.

Every constant carries its source.
"""

from __future__ import annotations

__all__ = [
    "C_CGS",
    "G_CGS",
    "GM_SUN_CGS",
    "MSUN_G",
    "MSUN_KM",
    "DENSITY_CGS_TO_GEOM",
    "PRESSURE_CGS_TO_GEOM",
    "MEV_FM3_TO_DYN_CM2",
    "MEV_FM3_TO_G_CM3",
    "MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2",
    "KM_PER_MSUN",
    "RHO_SATURATION_G_CM3",
]

#: Speed of light in cm/s, exact (SI definition of the metre).
C_CGS = 2.99792458e10
#: Newtonian constant in cm^3 g^-1 s^-2, CODATA 2018 (Tiesinga et al. 2021,
#: Rev. Mod. Phys. 93, 025010).  Known to about 2e-5; only used where a mass
#: must be expressed in grams.
G_CGS = 6.67430e-8
#: Nominal solar mass parameter GM_sun in cm^3 s^-2, exact by definition
#: (IAU 2015 Resolution B3; Prsa et al. 2016, AJ 152, 41).
GM_SUN_CGS = 1.3271244e26
#: Solar mass in grams, GM_sun / G (IAU 2015 with CODATA 2018 G).
MSUN_G = GM_SUN_CGS / G_CGS
#: One solar mass as a length, GM_sun / c^2, in km (= 1.4766250 km).
MSUN_KM = GM_SUN_CGS / C_CGS**2 / 1e5
#: Alias kept for readability in conversions: km per solar mass.
KM_PER_MSUN = MSUN_KM

#: A mass density in g/cm^3 times this factor gives an energy density in km^-2
#: (G/c^2 in cm/g, times 1e10 cm^2/km^2).
DENSITY_CGS_TO_GEOM = G_CGS / C_CGS**2 * 1e10
#: A pressure (or energy density) in dyn/cm^2 = erg/cm^3 times this factor
#: gives km^-2 (G/c^4 in cm/erg, times 1e10 cm^2/km^2).
PRESSURE_CGS_TO_GEOM = G_CGS / C_CGS**4 * 1e10

#: 1 MeV/fm^3 in dyn/cm^2, exact (1 MeV = 1.602176634e-6 erg, 1 fm = 1e-13 cm;
#: SI 2019 value of the elementary charge).
MEV_FM3_TO_DYN_CM2 = 1.602176634e33
#: 1 MeV/fm^3 as a mass-energy density in g/cm^3 (divided by c^2).
MEV_FM3_TO_G_CM3 = MEV_FM3_TO_DYN_CM2 / C_CGS**2

#: A moment of inertia in km^3 (G = c = 1) times this factor is in 1e45 g cm^2
#: (1 km^3 = 1e15 cm^3, times c^2/G in g/cm).
MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2 = 1e15 / (G_CGS / C_CGS**2) / 1e45

#: Nuclear saturation rest-mass density in g/cm^3 used to place density nodes
#: (n_sat = 0.16 fm^-3 times the neutron mass; common practice, rounded).
RHO_SATURATION_G_CM3 = 2.7e14
