"""Cosmological parameters: one frozen, validated dataclass.

The energy budget today (a = 1) is

    omega_m + omega_r + omega_k + omega_de = 1,

with omega_m all matter (cold dark matter plus baryons), omega_r photons plus
``n_eff`` massless neutrino species at the CMB temperature ``t_cmb``, omega_k the
curvature term and omega_de the dark energy that closes the budget. Dark energy
has the equation of state w(a) = w0 + wa (1 - a) (Chevallier & Polarski 2001;
Linder 2003).
"""

import dataclasses
import math
from dataclasses import dataclass
from functools import cached_property

from .errors import ParameterError
from .units import NEUTRINO_TO_PHOTON_PER_SPECIES, OMEGA_GAMMA_H2_PER_T4

__all__ = ["Cosmology", "PLANCK18", "RANGES", "check_range"]

#: Allowed ranges (lo, hi), both ends included, for every cosmological parameter.
#: They are wide on purpose (closed and open test models are allowed); they
#: reject values no cosmological model can have (negative h, omega_b > omega_m
#: is checked separately).
RANGES = {
    "h": (0.05, 2.0),
    "omega_m": (1e-4, 20.0),
    "omega_b": (0.0, 20.0),
    "omega_k": (-20.0, 20.0),
    "w0": (-3.0, 0.5),
    "wa": (-5.0, 5.0),
    "t_cmb": (0.0, 30.0),
    "n_eff": (0.0, 20.0),
    "n_s": (0.5, 1.5),
    "sigma_8": (1e-4, 5.0),
    "a_s": (1e-12, 1e-6),
    "alpha_s": (-0.5, 0.5),
}


def check_range(name, value, lo, hi, where=""):
    """Raise ParameterError unless ``lo <= value <= hi`` (a finite real number).

    Parameters
    ----------
    name : str
        Parameter name used in the message.
    value : float
    lo, hi : float
        Allowed closed interval.
    where : str, optional
        Where the value came from (a file name), for the message.
    """
    src = f" in {where}" if where else ""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ParameterError(f"{name}{src}: expected a number in [{lo:g}, {hi:g}], got {value!r}")
    if not math.isfinite(value) or not lo <= value <= hi:
        raise ParameterError(f"{name}{src} = {value!r} is outside the allowed range [{lo:g}, {hi:g}]")


@dataclass(frozen=True)
class Cosmology:
    """A homogeneous cosmology: background parameters and the primordial spectrum.

    Parameters
    ----------
    h : float
        Dimensionless Hubble constant, H0 = 100 h km/s/Mpc.
    omega_m : float
        Total matter density today (cold dark matter plus baryons), in units of
        the critical density.
    omega_b : float
        Baryon density today; 0 <= omega_b <= omega_m.
    omega_k : float, default 0
        Curvature density today, Omega_k = -k c^2 / H0^2 (positive = open).
    w0, wa : float, default -1, 0
        Dark-energy equation of state w(a) = w0 + wa (1 - a).
    t_cmb : float, default 2.7255
        CMB temperature today in K (Fixsen 2009). 0 switches radiation off.
    n_eff : float, default 3.046
        Effective number of massless neutrino species.
    n_s : float
        Scalar spectral index.
    sigma_8 : float or None
        rms linear density contrast in top-hat spheres of 8 Mpc/h at z = 0.
    a_s : float or None
        Primordial scalar amplitude at k_pivot = 0.05/Mpc. At most one of
        ``sigma_8`` and ``a_s`` may be given.
    alpha_s : float, default 0
        Running of the spectral index, d n_s / d ln k.

    Notes
    -----
    Derived densities (cached properties): ``omega_gamma`` = Omega_gamma from
    t_cmb by the Stefan-Boltzmann law; ``omega_nu`` = n_eff 7/8 (4/11)^(4/3)
    omega_gamma; ``omega_r`` = their sum; ``omega_de`` = 1 - omega_m - omega_r -
    omega_k. Use ``dataclasses.replace(cosmo, sigma_8=0.8)`` for variants; it
    validates again.
    """

    h: float = 0.6766
    omega_m: float = 0.3111
    omega_b: float = 0.02242 / 0.6766**2
    omega_k: float = 0.0
    w0: float = -1.0
    wa: float = 0.0
    t_cmb: float = 2.7255
    n_eff: float = 3.046
    n_s: float = 0.9665
    sigma_8: float | None = 0.8102
    a_s: float | None = None
    alpha_s: float = 0.0

    def __post_init__(self):
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if value is None and f.name in ("sigma_8", "a_s"):
                continue
            check_range(f.name, value, *RANGES[f.name])
            object.__setattr__(self, f.name, float(value))
        if self.omega_b > self.omega_m:
            raise ParameterError(
                f"omega_b = {self.omega_b!r} exceeds omega_m = {self.omega_m!r}; "
                "omega_m counts all matter, baryons included, so need 0 <= omega_b <= omega_m")
        if self.sigma_8 is not None and self.a_s is not None:
            raise ParameterError(
                f"sigma_8 = {self.sigma_8!r} and a_s = {self.a_s!r} both given; "
                "the spectrum is normalised by one of them: remove the other")
        if self.omega_de < -20.0:
            raise ParameterError(
                f"omega_de = 1 - omega_m - omega_r - omega_k = {self.omega_de:.6g} is below -20")

    @cached_property
    def H0(self):
        """Hubble constant in km/s/Mpc."""
        return 100.0 * self.h

    @cached_property
    def omega_gamma(self):
        """Photon density today from t_cmb (Stefan-Boltzmann law)."""
        return OMEGA_GAMMA_H2_PER_T4 * self.t_cmb**4 / self.h**2

    @cached_property
    def omega_nu(self):
        """Massless-neutrino density today: n_eff 7/8 (4/11)^(4/3) omega_gamma."""
        return self.n_eff * NEUTRINO_TO_PHOTON_PER_SPECIES * self.omega_gamma

    @cached_property
    def omega_r(self):
        """Total radiation density today (photons plus massless neutrinos)."""
        return self.omega_gamma + self.omega_nu

    @cached_property
    def omega_de(self):
        """Dark-energy density today, closing the budget."""
        return 1.0 - self.omega_m - self.omega_r - self.omega_k

    @cached_property
    def omega_c(self):
        """Cold dark matter density today, omega_m - omega_b."""
        return self.omega_m - self.omega_b

    def as_dict(self):
        """All parameters and derived densities as a plain dict (for JSON output)."""
        d = dataclasses.asdict(self)
        for name in ("omega_gamma", "omega_nu", "omega_r", "omega_de"):
            d[name] = getattr(self, name)
        return d


#: Planck 2018 results VI (A&A 641, A6, 2020), Table 2, last column
#: (TT,TE,EE+lowE+lensing+BAO): H0 = 67.66, Omega_m = 0.3111,
#: Omega_b h^2 = 0.02242, n_s = 0.9665, sigma_8 = 0.8102. Radiation here is
#: massless (n_eff = 3.046); Planck's 0.06 eV neutrino is counted in omega_m.
PLANCK18 = Cosmology()
