"""Fit the coefficients of the daily P-I integral used by ``euphotic.models.platt`` (run from
the repo root: ``python scripts/fit_platt_daily_integral.py``; needs scipy).

The exact dimensionless function (see the module docstring of euphotic.models.platt)

    f(x) = (1/pi) * integral_0^pi Ein(x sin(theta)) d(theta),
    Ein(y) = E1(y) + ln(y) + euler_gamma = integral_0^y (1 - exp(-s)) / s ds,

is computed with scipy.special.exp1 and scipy.integrate.quad. Platt, Sathyendranath & Ravindran
(1990) replaced it by a fifth-order polynomial in x = I*_m; their table of coefficients was not
at hand, so the coefficients below are OUR OWN least-squares fit to the exact integral:

* x <= X_SPLIT: f(x) ~ sum_{k=1..5} Omega_k x^k, with Omega_1 = 2/pi fixed (the exact slope
  at low light) and Omega_2..Omega_5 fitted by least squares of the relative error on a fine
  grid of 0 < x <= X_SPLIT;
* x > X_SPLIT: the large-x asymptote f(x) ~ ln(x) - ln(2) + euler_gamma + 2/(pi x) (derived in
  the module docstring) plus c3 / x^3 + c5 / x^5, with c5 set so that both pieces meet at
  X_SPLIT and c3 fitted by least squares of the relative error on X_SPLIT < x <= 1000.

It prints the coefficients (pasted into euphotic/models/platt.py) and the largest relative error
of the approximation against the exact f on 0 < x <= 1000.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, special

X_SPLIT = 3.5
GAMMA = float(np.euler_gamma)


def ein(y: float) -> float:
    """Ein(y) = integral_0^y (1 - e^-s)/s ds (its series below 1e-3, where E1 + ln cancels)."""
    if y < 1e-3:
        return y - y**2 / 4 + y**3 / 18 - y**4 / 96
    return float(special.exp1(y)) + np.log(y) + GAMMA


def f_exact(x: float) -> float:
    """(1/pi) integral_0^pi Ein(x sin t) dt (symmetric about pi/2, so twice the half)."""
    if x == 0.0:
        return 0.0
    v, _ = integrate.quad(lambda t: ein(x * np.sin(t)), 0.0, np.pi / 2, epsabs=0.0,
                          epsrel=1e-13, limit=200)
    return 2.0 * v / np.pi


def main() -> None:
    near = np.linspace(X_SPLIT / 4000, X_SPLIT, 4000)
    fn = np.array([f_exact(x) for x in near])
    rest = fn - 2.0 * near / np.pi
    a = np.stack([near**k for k in range(2, 6)], axis=1)
    omega, *_ = np.linalg.lstsq(a / fn[:, None], rest / fn, rcond=None)
    omega = np.concatenate([[2.0 / np.pi], omega])
    poly_at_split = sum(c * X_SPLIT ** (k + 1) for k, c in enumerate(omega))

    far = np.geomspace(X_SPLIT, 1000.0, 3000)[1:]
    ff = np.array([f_exact(x) for x in far])
    base = np.log(far) - np.log(2.0) + GAMMA + 2.0 / (np.pi * far)
    # continuity: c3 / s^3 + c5 / s^5 = poly(s) - base(s) at s = X_SPLIT
    s = X_SPLIT
    gap = poly_at_split - (np.log(s) - np.log(2.0) + GAMMA + 2.0 / (np.pi * s))
    # c5 = (gap - c3 / s^3) s^5; residual in c3: c3 (x^-3 - s^2 x^-5) = f - base - gap s^5 x^-5
    col = far**-3 - s**2 * far**-5
    rhs = ff - base - gap * s**5 * far**-5
    c3 = float(np.linalg.lstsq((col / ff)[:, None], rhs / ff, rcond=None)[0][0])
    c5 = (gap - c3 / s**3) * s**5

    print("OMEGA =", tuple(float(c) for c in omega))
    print("C3, C5 =", c3, c5)
    approx_near = sum(c * near ** (k + 1) for k, c in enumerate(omega))
    approx_far = base + c3 * far**-3 + c5 * far**-5
    print(f"max relative error, 0 < x <= {X_SPLIT}: {np.max(np.abs(approx_near / fn - 1)):.3e}")
    print(f"max relative error, {X_SPLIT} < x <= 1000: {np.max(np.abs(approx_far / ff - 1)):.3e}")


if __name__ == "__main__":
    main()
