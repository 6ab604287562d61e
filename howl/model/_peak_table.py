"""The peak-factor table of :func:`howl.model.plan.peak_factor_db`, shipped as data.

The peak factor (the highest of N independent Rician power samples above the band's mean
power: the mean and the 10 % and 90 % quantiles, in dB) is tabulated over a grid of
(log10 N, log10(K + 1e-3)). Building the table needs scipy's noncentral chi-square and
costs about 0.8 s of CPU with the imports, so it is built once by :func:`build_table`
(``python -m howl.model._peak_table`` rewrites ``howl/data/peak_factor_table.csv``) and
every plan only reads the file (:func:`table`) and interpolates it bilinearly
(:func:`interpolate`, the same arithmetic as scipy's ``RegularGridInterpolator`` with
``method="linear"``, which the tests check point for point).
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

#: Quantiles of the spread (10 %, 90 %).
SPREAD_QUANTILES = (0.10, 0.90)

LOGN = np.linspace(0.0, 7.0, 29)
LOGK = np.linspace(-3.0, 3.0, 37)  # log10(K + 1e-3); K = 0 sits at −3

TABLE_FILE = Path(__file__).resolve().parent.parent / "data" / "peak_factor_table.csv"


def _max_quantile(q, n, k):
    """Quantile q of max of n Rician power samples, re the mean power (1 + K) (σ² = 1)."""
    from scipy.special import chndtrix

    return chndtrix(np.asarray(q) ** (1.0 / np.asarray(n)), 2.0, 2.0 * np.asarray(k)) / 2.0 / (1.0 + np.asarray(k))


def build_table() -> np.ndarray:
    """The table (len(LOGN), len(LOGK), 3) of the peak factor in dB: mean, 10 %, 90 % (needs scipy)."""
    from scipy.integrate import simpson
    from scipy.special import chndtr

    n = 10.0 ** LOGN[:, None]
    k = np.maximum(10.0 ** LOGK[None, :] - 1e-3, 0.0)
    q_lo = _max_quantile(SPREAD_QUANTILES[0], n, k)
    q_hi = _max_quantile(SPREAD_QUANTILES[1], n, k)
    # mean of the maximum: E = ∫0^∞ (1 − F(x)^N) dx, x re σ²; the integrand is ≈ 1 below the 0.1 % point x₀,
    # so E = x₀ + ∫ from x₀ to the 99.99 % point (Simpson, 65 points)
    x0 = _max_quantile(1e-3, n, k) * (1.0 + k)
    top = _max_quantile(1.0 - 1e-4, n, k) * (1.0 + k)
    t = np.linspace(0.0, 1.0, 65)
    x = x0[..., None] + (top - x0)[..., None] * t  # (N, K, 65)
    surv = 1.0 - chndtr(2.0 * x, 2.0, 2.0 * k[..., None]) ** n[..., None]
    mean = (x0 * (1.0 - 0.5e-3) + simpson(surv, x=x, axis=-1)) / (1.0 + k)
    return np.stack([10.0 * np.log10(np.maximum(v, 1e-12)) for v in (mean, q_lo, q_hi)], axis=-1)


def write_table(path: Path = TABLE_FILE) -> None:
    """Write :func:`build_table` as CSV (17 significant digits: read back bit for bit)."""
    tab = build_table()
    gn, gk = np.meshgrid(LOGN, LOGK, indexing="ij")
    rows = np.column_stack([gn.ravel(), gk.ravel(), tab.reshape(-1, 3)])
    header = ("peak factor of the highest of N Rician power samples above the mean power, dB "
              "(written by python -m howl.model._peak_table)\nlog10_n,log10_k_plus_1e-3,mean_db,q10_db,q90_db")
    np.savetxt(path, rows, fmt="%.17g", delimiter=",", header=header)


@functools.lru_cache(maxsize=1)
def table() -> np.ndarray:
    """The shipped table (len(LOGN), len(LOGK), 3), read once per process."""
    rows = np.loadtxt(TABLE_FILE, delimiter=",")
    if rows.shape != (LOGN.size * LOGK.size, 5) or not (
        np.array_equal(rows[:, 0], np.repeat(LOGN, LOGK.size)) and np.array_equal(rows[:, 1], np.tile(LOGK, LOGN.size))
    ):
        raise RuntimeError(f"{TABLE_FILE} does not match the grid; rerun python -m howl.model._peak_table")
    return rows[:, 2:].reshape(LOGN.size, LOGK.size, 3)


def _cell(grid: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cell index i (grid[i] <= x < grid[i+1], the last point in the last cell) and the fraction into it."""
    i = np.clip(np.searchsorted(grid, x, side="right") - 1, 0, grid.size - 2)
    return i, (x - grid[i]) / (grid[i + 1] - grid[i])


def interpolate(log_n: np.ndarray, log_k: np.ndarray) -> np.ndarray:
    """Bilinear interpolation of :func:`table` at points inside the grid → (P, 3)."""
    tab = table()
    i, y0 = _cell(LOGN, np.asarray(log_n, float))
    j, y1 = _cell(LOGK, np.asarray(log_k, float))
    # the four corners in the order and with the rounding of scipy's RegularGridInterpolator (linear)
    value = np.array([0.0])
    for a, wa in ((i, 1 - y0), (i + 1, y0)):
        for b, wb in ((j, 1 - y1), (j + 1, y1)):
            value = value + tab[a, b] * ((np.array([1.0]) * wa) * wb)[:, None]
    return value


if __name__ == "__main__":
    write_table()
    print(f"wrote {TABLE_FILE}")
