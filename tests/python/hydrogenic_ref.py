"""Independent reference values for the line-predictor checks.

Nothing here reads glowcheck code or tables: constants come from scipy.constants (CODATA 2022), nuclear
masses from CODATA 2022 and periodictable (AME 2020), hydrogen levels from the NIST ASD file shipped in
arc-alkali-rydberg-calculator, refraction from PyAstronomy / ref_index and formulas written out here.
All physics is double precision (f64) unless a function says otherwise.
"""

from __future__ import annotations

import importlib.util
import math
import pathlib
import re
from fractions import Fraction
from functools import lru_cache

import scipy.constants as sc
from sympy import Rational
from sympy.physics.wigner import wigner_6j

# ---------------------------------------------------------------------------------------------------------
# Constants: CODATA 2022 as shipped in scipy.constants (scipy >= 1.15; 1.17.1 pinned).
# ---------------------------------------------------------------------------------------------------------


def codata(name: str) -> float:
    """Value of a CODATA 2022 constant by its CODATA name (scipy.constants.physical_constants)."""
    return sc.physical_constants[name][0]


R_INF_PER_M = codata("Rydberg constant")  # CODATA 2022: 10 973 731.568 157 m^-1
ALPHA = codata("fine-structure constant")  # CODATA 2022: 7.297 352 5643e-3
ELECTRON_MASS_U = codata("electron mass in u")  # CODATA 2022
# h, c and e are exact in the SI since 2019, so hc/e is exact.
HC_EV_M = sc.h * sc.c / sc.e
# m_e c^2 / (h c) = 2 R_inf / alpha^2, in m^-1: turns energies in units of m_e c^2 into wavenumbers.
ELECTRON_REST_WAVENUMBER_PER_M = 2.0 * R_INF_PER_M / ALPHA**2

# CODATA 2018 alpha (from memory: 7.297 352 5693e-3); the CODATA 2022 value differs, which tells the
# editions apart.
ALPHA_CODATA_2018_FROM_MEMORY = 7.2973525693e-3

# ---------------------------------------------------------------------------------------------------------
# Nuclei: Z and nuclear mass in electron masses.
# ---------------------------------------------------------------------------------------------------------

_CODATA_RATIO = {
    "H": (1, "proton-electron mass ratio"),
    "D": (1, "deuteron-electron mass ratio"),
    "T": (1, "triton-electron mass ratio"),
    "He3": (2, "helion-electron mass ratio"),
    "He4": (2, "alpha particle-electron mass ratio"),
}
# Heavier nuclei: AME 2020 atomic masses (periodictable 2.1.0) minus Z electron masses. The total electron
# binding energy (at most ~2.1 keV, for O) is neglected: about 1.4e-7 of the nuclear mass, which moves a line
# by (m_e/M) * 1.4e-7 < 1e-11 relative.
_AME_ISOTOPE = {
    "Li6": (3, "Li", 6),
    "Li7": (3, "Li", 7),
    "Be9": (4, "Be", 9),
    "B11": (5, "B", 11),
    "C12": (6, "C", 12),
    "N14": (7, "N", 14),
    "O16": (8, "O", 16),
}
ALL_NUCLEI = list(_CODATA_RATIO) + list(_AME_ISOTOPE)


def nucleus(symbol: str) -> tuple[int, float, str]:
    """(Z, nuclear mass / electron mass, source) for a nucleus symbol as glowsim spells it."""
    if symbol in _CODATA_RATIO:
        z, name = _CODATA_RATIO[symbol]
        return z, codata(name), f"CODATA 2022 {name} (scipy.constants)"
    z, elem, a = _AME_ISOTOPE[symbol]
    import periodictable

    atomic_u = getattr(periodictable, elem)[a].mass
    return (
        z,
        (atomic_u - z * ELECTRON_MASS_U) / ELECTRON_MASS_U,
        f"AME 2020 atomic mass of {a}{elem} (periodictable {periodictable.__version__}) - Z m_e",
    )


# ---------------------------------------------------------------------------------------------------------
# Dirac + recoil levels (f64, numerically stable forms).
# ---------------------------------------------------------------------------------------------------------


def kappa(l: int, j2: int) -> int:
    """Dirac angular quantum number kappa = (-1)^(j-l+1/2) (j+1/2); j2 = 2j."""
    jp = (j2 + 1) // 2
    return -jp if j2 == 2 * l + 1 else jp


def dirac_recoil_level(z: int, ratio: float, n: int, l: int, j2: int) -> float:
    """Level energy in units of m_e c^2 (negative = bound), rest energy removed.

    E = m_r c^2 [f - 1] - m_r^2 c^2 / (2M) [f - 1]^2 + (1 - d_l0)/(kappa(2l+1)) (Z a)^4 m_r^3 c^2/(2 n^3 m_N^2)
    with f = [1 + (Z a / (n - delta))^2]^(-1/2), delta = j + 1/2 - sqrt((j + 1/2)^2 - (Z a)^2) and
    M = m_e + m_N (the Dirac-with-recoil expression used by CODATA; last term: Barker-Glover).
    """
    za = z * ALPHA
    jp = (j2 + 1) / 2.0
    delta = za * za / (jp + math.sqrt(jp * jp - za * za))
    x = (za / (n - delta)) ** 2
    fm1 = math.expm1(-0.5 * math.log1p(x))  # f - 1 without cancellation
    mu = ratio / (1.0 + ratio)  # m_r / m_e
    big_m = 1.0 + ratio  # M / m_e
    e = mu * fm1 - mu * mu / (2.0 * big_m) * fm1 * fm1
    if l != 0:
        e += za**4 * mu**3 / (2.0 * n**3 * ratio * ratio) / (kappa(l, j2) * (2 * l + 1))
    return e


def dirac_recoil_level_mp(z: int, ratio: float, n: int, l: int, j2: int, dps: int = 40):
    """Same as dirac_recoil_level in mpmath at `dps` digits: a check on the f64 version."""
    import mpmath as mp

    with mp.workdps(dps):
        za = z * mp.mpf(ALPHA)
        jp = mp.mpf(j2 + 1) / 2
        delta = jp - mp.sqrt(jp * jp - za * za)
        f = 1 / mp.sqrt(1 + (za / (n - delta)) ** 2)
        r = mp.mpf(ratio)
        mu = r / (1 + r)
        e = mu * (f - 1) - mu * mu / (2 * (1 + r)) * (f - 1) ** 2
        if l != 0:
            e += za**4 * mu**3 / (2 * n**3 * r * r) / (kappa(l, j2) * (2 * l + 1))
        return e


# ---------------------------------------------------------------------------------------------------------
# Line strengths: exact radial integrals and 6j symbols.
# ---------------------------------------------------------------------------------------------------------


def _laguerre_coeffs(k: int, a: int) -> list[Fraction]:
    """Coefficients c_i of the generalized Laguerre polynomial L_k^a(x) = sum c_i x^i."""
    return [Fraction((-1) ** i * math.comb(k + a, k - i), math.factorial(i)) for i in range(k + 1)]


def _radial_poly(n: int, l: int) -> tuple[Fraction, list[Fraction]]:
    """R_nl(r) = sqrt(norm2) * sum_i p_i r^i * exp(-r/n) for hydrogen (Z = 1, r in Bohr radii)."""
    norm2 = Fraction(2, n) ** 3 * Fraction(math.factorial(n - l - 1), 2 * n * math.factorial(n + l))
    lag = _laguerre_coeffs(n - l - 1, 2 * l + 1)
    # (2r/n)^l L(2r/n)
    poly = [Fraction(0)] * (l + len(lag))
    for i, c in enumerate(lag):
        poly[l + i] = c * Fraction(2, n) ** (l + i)
    return norm2, poly


@lru_cache(maxsize=None)
def radial_integral_sq(n1: int, l1: int, n2: int, l2: int) -> Fraction:
    """Exact R^2 = (int_0^inf R_n1l1 R_n2l2 r^3 dr)^2 in Bohr radii squared (hydrogen, Z = 1).

    Uses int_0^inf r^k exp(-a r) dr = k! / a^(k+1) term by term on the exact Laguerre polynomials.
    """
    na, pa = _radial_poly(n1, l1)
    nb, pb = _radial_poly(n2, l2)
    a = Fraction(1, n1) + Fraction(1, n2)
    total = Fraction(0)
    for i, ci in enumerate(pa):
        if ci == 0:
            continue
        for k, ck in enumerate(pb):
            if ck == 0:
                continue
            p = i + k + 3
            total += ci * ck * Fraction(math.factorial(p)) / a ** (p + 1)
    return na * nb * total * total


@lru_cache(maxsize=None)
def sixj_sq(l: int, j2: int, lp: int, jp2: int) -> Fraction:
    """{l j 1/2; j' l' 1}^2 exactly, from sympy.physics.wigner."""
    v = wigner_6j(l, Rational(j2, 2), Rational(1, 2), Rational(jp2, 2), lp, 1)
    v2 = Rational(v * v)
    return Fraction(int(v2.p), int(v2.q))


def line_strength(nu: int, lu: int, ju2: int, nl: int, ll: int, jl2: int) -> Fraction:
    """E1 line strength S in (e a0)^2 (hydrogen, Z = 1), LS coupling with spin 1/2:

    S = (2j+1)(2j'+1) {l j 1/2; j' l' 1}^2 max(l, l') R^2(n l -> n' l').
    """
    return (ju2 + 1) * (jl2 + 1) * sixj_sq(lu, ju2, ll, jl2) * max(lu, ll) * radial_integral_sq(nu, lu, nl, ll)


def e1_components(upper: int, lower: int):
    """All E1 fine-structure components (lu, ju2, ll, jl2) of the n_upper -> n_lower transition."""
    out = []
    for lu in range(upper):
        for ll in (lu - 1, lu + 1):
            if ll < 0 or ll >= lower:
                continue
            for ju2 in (2 * lu - 1, 2 * lu + 1):
                if ju2 < 1:
                    continue
                for jl2 in (2 * ll - 1, 2 * ll + 1):
                    if jl2 < 1 or abs(ju2 - jl2) > 2:
                        continue
                    out.append((lu, ju2, ll, jl2))
    return out


def centroid(components) -> float:
    """Blend centroid in vacuum: components are (wavenumber_per_m, strength); weights S sigma^3
    (upper levels populated in proportion to 2j+1, photon counting). Returns the wavelength in m."""
    sw = 0.0
    swl = 0.0
    for sigma, s in components:
        w = float(s) * sigma**3
        sw += w
        swl += w / sigma
    return swl / sw


def mean_wavenumber(components) -> float:
    """Photon-weighted (S sigma^3) mean wavenumber in m^-1 of (wavenumber_per_m, strength) components.
    Differs from 1/centroid by the relative variance of sigma (up to ~1e-8 for fine-structure blends)."""
    sw = 0.0
    sws = 0.0
    for sigma, s in components:
        w = float(s) * sigma**3
        sw += w
        sws += w * sigma
    return sws / sw


# ---------------------------------------------------------------------------------------------------------
# Lines from the Dirac + recoil levels.
# ---------------------------------------------------------------------------------------------------------


def dirac_line(symbol: str, lower: int, upper: int):
    """(vacuum centroid in nm, list of component dicts) from the Dirac + recoil levels."""
    z, ratio, _ = nucleus(symbol)
    comps = []
    for lu, ju2, ll, jl2 in e1_components(upper, lower):
        e = dirac_recoil_level(z, ratio, upper, lu, ju2) - dirac_recoil_level(z, ratio, lower, ll, jl2)
        sigma = e * ELECTRON_REST_WAVENUMBER_PER_M
        s = line_strength(upper, lu, ju2, lower, ll, jl2)
        comps.append(
            {"upper_l": lu, "upper_j2": ju2, "lower_l": ll, "lower_j2": jl2, "sigma_per_m": sigma, "strength": s}
        )
    lam_m = centroid([(c["sigma_per_m"], c["strength"]) for c in comps])
    return lam_m * 1e9, comps


def dirac_level_ev(symbol: str, n: int, l: int, j2: int) -> float:
    """Dirac + recoil level energy in eV (negative = bound)."""
    z, ratio, _ = nucleus(symbol)
    return dirac_recoil_level(z, ratio, n, l, j2) * ELECTRON_REST_WAVENUMBER_PER_M * HC_EV_M


# ---------------------------------------------------------------------------------------------------------
# NIST ASD H I levels (ASD v5.5.6 export shipped in arc-alkali-rydberg-calculator 3.10.2).
# ---------------------------------------------------------------------------------------------------------

L_LETTERS = "spdfghiklmnoqrtuv"


def nist_h_level_file() -> pathlib.Path:
    """Path of arc/data/h_NIST_level_data.ascii, found without importing arc (importing it copies data)."""
    spec = importlib.util.find_spec("arc")
    if spec is None or not spec.submodule_search_locations:
        raise FileNotFoundError("arc-alkali-rydberg-calculator is not installed in this Python")
    return pathlib.Path(list(spec.submodule_search_locations)[0]) / "data" / "h_NIST_level_data.ascii"


@lru_cache(maxsize=None)
def nist_h_levels() -> dict:
    """{(n, l, 2j): energy above 1s in eV} from the NIST ASD table (bracketed values included)."""
    levels = {}
    n = l = None
    for raw in nist_h_level_file().read_text().splitlines():
        cols = raw.split("|")
        if len(cols) < 3:
            continue
        name = cols[0].strip()
        if name:
            m = re.fullmatch(r"\.?(\d+)([a-z])", name)
            if not m:
                raise ValueError(f"unexpected configuration {name!r}")
            n, l = int(m.group(1)), L_LETTERS.index(m.group(2))
        j = cols[1].strip()
        e = cols[2].strip().strip("[]")
        if not j or not e:
            continue
        num, den = j.split("/")
        assert den == "2"
        levels[(n, l, int(num))] = float(e)
    return levels


def nist_h_line(lower: int, upper: int):
    """Vacuum centroid (nm) of an H I line from the NIST levels, same weighting as above."""
    lv = nist_h_levels()
    comps = []
    for lu, ju2, ll, jl2 in e1_components(upper, lower):
        eu = lv[(upper, lu, ju2)]
        el = lv[(lower, ll, jl2)]
        sigma = (eu - el) / HC_EV_M
        comps.append((sigma, line_strength(upper, lu, ju2, lower, ll, jl2)))
    return centroid(comps) * 1e9


# ---------------------------------------------------------------------------------------------------------
# Air.
# ---------------------------------------------------------------------------------------------------------


def morton2000_n(vac_nm: float) -> float:
    """Refractive index of IAU standard air (dry, 15 C, 101 325 Pa, 450 ppm CO2) as a function of the vacuum
    wavenumber: Morton (2000, ApJS 130, 403), n - 1 = 8.34254e-5 + 2.406147e-2/(130 - s^2)
    + 1.5998e-4/(38.9 - s^2), s in um^-1. Coefficients from memory; the same numbers are the standard-air
    dispersion (A, B, C) of the modified Edlen formula in ref_index.edlen_ri, which the tests compare."""
    s2 = (1e3 / vac_nm) ** 2
    return 1.0 + 8.34254e-5 + 2.406147e-2 / (130.0 - s2) + 1.5998e-4 / (38.9 - s2)


def morton2000_air_nm(vac_nm: float) -> float:
    """Air wavelength in IAU standard air (Morton 2000)."""
    return vac_nm / morton2000_n(vac_nm)
