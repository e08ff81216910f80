"""Small random-system builders shared by the verdict and CLI tests (test data only)."""

from __future__ import annotations

import numpy as np

from audit.core.realization import Realization


def random_poles(rng: np.random.Generator, n: int, *, discrete: bool, unstable: bool = False,
                 spread_decades: float = 2.0) -> list[complex]:
    """n poles (conjugate pairs kept together), magnitudes spread over some decades."""
    poles: list[complex] = []
    while len(poles) < n:
        mag = 10 ** rng.uniform(-spread_decades / 2, spread_decades / 2)
        if n - len(poles) >= 2 and rng.random() < 0.5:
            angle = rng.uniform(0.2, 1.3)
            p = -mag * np.cos(angle) + 1j * mag * np.sin(angle)
            poles += [p, np.conj(p)]
        else:
            poles.append(-mag + 0j)
    poles = poles[:n]
    if unstable:
        poles[0] = -poles[0].real + 0j if abs(poles[0].imag) == 0 else poles[0]
        if poles[0].real < 0:
            poles[0] = complex(abs(poles[0].real), 0)
    if discrete:
        period = 0.1 / max(abs(p) for p in poles)
        poles = [complex(np.exp(p * period * 5)) for p in poles]
    return poles


def realization_with_poles(rng: np.random.Generator, poles: list[complex], m: int, p: int,
                           sample_period: float | None = None, *, with_d: bool = True) -> Realization:
    """A real block-diagonal realization with the given poles and random B, C, D."""
    n = len(poles)
    a = np.zeros((n, n))
    i = 0
    while i < n:
        z = poles[i]
        if abs(z.imag) > 0 and i + 1 < n:
            a[i:i + 2, i:i + 2] = [[z.real, z.imag], [-z.imag, z.real]]
            i += 2
        else:
            a[i, i] = z.real
            i += 1
    b = rng.standard_normal((n, m))
    c = rng.standard_normal((p, n))
    d = rng.standard_normal((p, m)) if with_d else np.zeros((p, m))
    return Realization.from_arrays(a, b, c, d, sample_period)


def random_transform(rng: np.random.Generator, n: int, cond: float) -> np.ndarray:
    """A random T with condition number ``cond`` (orthogonal x diagonal x orthogonal)."""
    if n == 0:
        return np.zeros((0, 0))
    u, _ = np.linalg.qr(rng.standard_normal((n, n)))
    v, _ = np.linalg.qr(rng.standard_normal((n, n)))
    s = np.logspace(0, -np.log10(cond), n) if n > 1 else np.ones(1)
    return (u * s) @ v.T
