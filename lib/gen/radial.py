"""Exact hydrogen radial dipole integrals, in rational arithmetic (build-time only).

R(n l -> n' l') = integral of R_nl R_n'l' r^3 dr in units of a_0 / Z. Its square is rational, so Python's
Fraction gives it exactly; nothing here runs on the device.
"""
from fractions import Fraction
from math import comb, factorial
from functools import lru_cache


@lru_cache(maxsize=None)
def _laguerre(n, l):
    """Coefficients of (2r/n)^i in L_{n-l-1}^{(2l+1)}(2r/n), modern convention."""
    k = n - l - 1
    a = 2 * l + 1
    return [Fraction((-1) ** i * comb(k + a, k - i), factorial(i)) for i in range(k + 1)]


def _norm2(n, l):
    """Square of the normalisation constant of R_nl (Z = 1, a_0 = 1)."""
    return Fraction(8, n ** 3) * Fraction(factorial(n - l - 1), 2 * n * factorial(n + l))


@lru_cache(maxsize=None)
def radial_squared(n, l, m, k):
    """|<n l | r | m k>|^2 exactly (Z = 1)."""
    ci = _laguerre(n, l)
    ck = _laguerre(m, k)
    s = Fraction(0)
    nm = n + m
    for i, c1 in enumerate(ci):
        for j, c2 in enumerate(ck):
            p = l + k + i + j + 3
            # (2/n)^(l+i) (2/m)^(k+j) p! / a^(p+1), a = (n+m)/(n m)
            s += c1 * c2 * Fraction(2 ** (l + i + k + j) * factorial(p) * n ** (k + j + 4) * m ** (l + i + 4),
                                    nm ** (p + 1))
    return _norm2(n, l) * _norm2(m, k) * s * s


def channels(n, m):
    """E1 channels (l, k) of upper n to lower m < n: k = l +- 1, l < n, k < m; lower k ascending."""
    out = []
    for k in range(m):
        for l in (k - 1, k + 1):
            if 0 <= l < n:
                out.append((l, k))
    return out


if __name__ == "__main__":
    # Oscillator-strength spot check: f(2p -> 1s)... printed as R^2 for a quick look.
    print(float(radial_squared(2, 1, 1, 0)))  # 2^15/3^10 * ... = 1.6648 (a_0^2)
