"""Image sources of a shoebox and their synthesis into one IR (the parts of :mod:`howl.model.images`
that know nothing of rooms' materials or rigs).

* :func:`shoebox_images`: the images up to an order (Allen & Berkley 1979, §II), their
  reflection counts per surface and mirror signs (the same in every room: cached per order).
* :func:`band_weights`: zero-phase raised-cosine crossovers that sum to one.
* :func:`_fractional_delay_kernel`: the Blackman-windowed sinc fractional delay (Laakso et al.
  1996); :func:`_place_images` adds images' kernels into one band, :func:`_scatter` into
  several.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ImageSet:
    """Image sources of one source in a shoebox room (all arrays over images).

    ``positions_m`` (N, 3); ``order`` (N,) total number of reflections;
    ``hits`` (N, 6) reflections per surface in :data:`howl.rig.SHOEBOX_SURFACES`
    order; ``mirror_sign`` (N, 3) ±1: −1 where the image is mirrored an odd
    number of times along that axis.
    """

    positions_m: np.ndarray
    order: np.ndarray
    hits: np.ndarray
    mirror_sign: np.ndarray



# ---------------------------------------------------------------------------
# images
# ---------------------------------------------------------------------------


@functools.lru_cache(maxsize=8)
def _index_triples(max_order: int, *, exact: bool = False) -> np.ndarray:
    """All integer (kx, ky, kz) with |kx|+|ky|+|kz| ≤ max_order (or == max_order if ``exact``).

    The same for every room: cached (read-only) per order.
    """
    k = _index_triples_uncached(max_order, exact=exact)
    k.flags.writeable = False
    return k


def _index_triples_uncached(max_order: int, *, exact: bool = False) -> np.ndarray:
    n = int(max_order)
    k = np.arange(-n, n + 1)
    kx, ky = np.meshgrid(k, k, indexing="ij")
    kx = kx.ravel()
    ky = ky.ravel()
    rest = n - np.abs(kx) - np.abs(ky)
    keep = rest >= 0
    kx, ky, rest = kx[keep], ky[keep], rest[keep]
    if exact:
        # kz = ±rest (one value when rest == 0)
        counts = np.where(rest == 0, 1, 2)
        kx_r = np.repeat(kx, counts)
        ky_r = np.repeat(ky, counts)
        rest_r = np.repeat(rest, counts)
        first = np.ones(kx_r.size, dtype=bool)
        starts = np.cumsum(counts) - counts
        second = np.zeros(kx_r.size, dtype=bool)
        second[starts[counts == 2] + 1] = True
        first[second] = False
        kz = np.where(second, -rest_r, rest_r)
        return np.stack([kx_r, ky_r, kz], axis=1)
    counts = 2 * rest + 1
    kx_r = np.repeat(kx, counts)
    ky_r = np.repeat(ky, counts)
    starts = np.cumsum(counts) - counts
    within = np.arange(kx_r.size) - np.repeat(starts, counts)
    kz = within - np.repeat(rest, counts)
    return np.stack([kx_r, ky_r, kz], axis=1)


def _images_from_indices(dims: np.ndarray, src: np.ndarray, k: np.ndarray) -> ImageSet:
    odd = (k % 2) != 0
    pos = np.where(odd, (k + 1) * dims - src, k * dims + src)
    ka = np.abs(k)
    hi = np.where(k >= 0, (ka + 1) // 2, ka // 2)  # hits on the wall at coordinate L
    lo = np.where(k >= 0, ka // 2, (ka + 1) // 2)  # hits on the wall at coordinate 0
    # SHOEBOX_SURFACES order: floor (z=0), ceiling (z=H), wall_x0, wall_x1, wall_y0, wall_y1
    hits = np.stack([lo[:, 2], hi[:, 2], lo[:, 0], hi[:, 0], lo[:, 1], hi[:, 1]], axis=1)
    return ImageSet(
        positions_m=pos.astype(float),
        order=ka.sum(axis=1),
        hits=hits,
        mirror_sign=np.where(odd, -1.0, 1.0),
    )


@functools.lru_cache(maxsize=8)
def _image_layout(max_order: int) -> tuple[np.ndarray, ...]:
    """What the images up to ``max_order`` share in every room: (k, odd, order, hits, mirror_sign), read-only."""
    k = _index_triples(max_order)
    ref = _images_from_indices(np.zeros(3), np.zeros(3), k)
    out = (k.astype(float), (k % 2) != 0, ref.order, ref.hits, ref.mirror_sign)
    for a in out:
        a.flags.writeable = False
    return out


def shoebox_images(dimensions_m, source_position_m, max_order: int) -> ImageSet:
    """Image sources up to ``max_order`` reflections (Allen & Berkley 1979, §II).

    Image k (integers per axis) sits at k·L + s on an even axis and at (k + 1)·L − s = k·L + (L − s)
    on an odd one; the reflection counts and mirror signs depend on k alone (cached per order).
    """
    dims = np.asarray(dimensions_m, dtype=float)
    src = np.asarray(source_position_m, dtype=float)
    kf, odd, order, hits, mirror = _image_layout(int(max_order))
    pos = kf * dims
    pos += np.where(odd, dims - src, src)
    return ImageSet(positions_m=pos, order=order, hits=hits, mirror_sign=mirror)


def _first_missing_arrival_s(dims, src, mic, max_order: int, c: float) -> float:
    """Earliest arrival among the images of order max_order+1 (where the image set stops being complete)."""
    k = _index_triples(max_order + 1, exact=True)
    imgs = _images_from_indices(np.asarray(dims, float), np.asarray(src, float), k)
    d = np.linalg.norm(imgs.positions_m - np.asarray(mic, float), axis=1)
    return float(d.min() / c)


# ---------------------------------------------------------------------------
# synthesis helpers
# ---------------------------------------------------------------------------


def band_weights(freq_hz: np.ndarray, centres_hz) -> np.ndarray:
    """(B, F) zero-phase band weights summing to one at every frequency.

    Raised-cosine crossovers on log2 frequency between adjacent centres; the
    first band holds down to DC and the last up to Nyquist.
    """
    f = np.asarray(freq_hz, dtype=float)
    c = np.log2(np.asarray(centres_hz, dtype=float))
    lf = np.log2(np.maximum(f, 1e-12))
    w = np.zeros((c.size, f.size))
    if c.size == 1:
        w[0] = 1.0
        return w
    pos = np.interp(lf, c, np.arange(c.size))  # fractional band index, clamped at the ends
    lower = np.clip(np.floor(pos).astype(int), 0, c.size - 2)
    t = pos - lower
    up = np.sin(0.5 * math.pi * t) ** 2
    cols = np.arange(f.size)
    w[lower, cols] = 1.0 - up
    w[lower + 1, cols] += up
    return w


def _fractional_delay_kernel(delay_samples: np.ndarray, half_width: int, scale: np.ndarray | None = None):
    """Blackman-windowed sinc taps for each delay: (start index (N,), taps (N, 2·half_width)).

    Unit DC gain per delay (the taps are normalised to sum to one; with ``scale`` (N,) to sum
    to ``scale``), cut-off at Nyquist (windowed-sinc fractional delay: T. I. Laakso et al.,
    "Splitting the unit delay", IEEE Signal Processing Magazine 13(1):30–60, 1996, §III).

    sinc(o − f) = −(−1)^o·sin(πf)/(π(o − f)); the factor sin(πf)/π is the same for all taps of
    an image, so the normalisation removes it and it is never computed. The window's cosine is
    split by the angle-sum identity into one sine/cosine per image and a fixed table per tap,
    and every step works in place: the cost per tap is a few multiply-adds.
    """
    base = np.floor(delay_samples)
    frac = np.maximum(delay_samples - base, 1e-9)  # (N,), in (0, 1); never exactly 0 (sinc's 0/0)
    o = np.arange(-half_width + 1, half_width + 1)
    offs = o.astype(float)  # tap positions o
    sign = np.where(o % 2 == 0, -1.0, 1.0)
    taps = offs[None, :] - frac[:, None]  # tap position minus the exact delay
    np.reciprocal(taps, out=taps)
    taps *= sign
    # Blackman window on (o − f)/half_width: cos(a − b) = cos a cos b + sin a sin b
    a = (math.pi / half_width) * offs
    bf = (math.pi / half_width) * frac
    cw = np.cos(a)[None, :] * np.cos(bf)[:, None]
    cw += np.sin(a)[None, :] * np.sin(bf)[:, None]
    win = cw * 0.16  # 0.42 + 0.5·cos θ + 0.08·cos 2θ, with cos 2θ = 2cos²θ − 1
    win += 0.5
    win *= cw
    win += 0.34
    taps *= win
    norm = 1.0 / taps.sum(axis=1) if scale is None else np.asarray(scale, dtype=float) / taps.sum(axis=1)
    taps *= norm[:, None]
    return base.astype(np.int64) - half_width + 1, taps


#: Images per block of the one-band synthesis: the block's arrays stay small enough (≤ 96 kB) to be
#: reused from the heap, where one array for all images would be fresh memory (page faults) each call.
_PLACE_BLOCK = 384


#: Fractional delays tabulated per sample for the one-band synthesis (linear interpolation between
#: rows: the kernel is smooth in the delay, so the error is below 1e-6 of its peak; the tests check it).
_KERNEL_STEPS = 1024


@functools.lru_cache(maxsize=4)
def _kernel_table(half_width: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows of :func:`_fractional_delay_kernel` at fractions 0, 1/S, …, 1 and their differences."""
    frac = np.arange(_KERNEL_STEPS + 1) / _KERNEL_STEPS
    frac[-1] = 1.0 - 1e-12  # the last row is the delay of one whole sample, still on this row's taps
    _, rows = _fractional_delay_kernel(frac, half_width)
    rows.flags.writeable = False
    diff = np.diff(rows, axis=0)
    diff.flags.writeable = False
    return rows, diff


def _place_images(delay: np.ndarray, gain: np.ndarray, half_width: int, n: int) -> np.ndarray:
    """Σ over images of gain × the fractional-delay kernel at its delay, cut to [0, n) (one band).

    Block by block: the kernels of a block (linear interpolation in :func:`_kernel_table`) are
    added into the output in place (``np.add.at``), in order of arrival so that a block writes to
    one stretch.
    """
    # sorted by arrival on a coarse integer key (a radix sort): the blocks need locality, not order
    key = np.minimum(delay * (1.0 / 64.0), 32767.0).astype(np.int16)
    order = np.argsort(key, kind="stable")
    rows, diff = _kernel_table(half_width)
    base = np.floor(delay[order])
    pos = (delay[order] - base) * _KERNEL_STEPS
    row = np.minimum(pos.astype(np.intp), _KERNEL_STEPS - 1)
    g = gain[order]
    gr = (pos - row) * g
    start_all = base.astype(np.int64) - half_width + 1
    out = np.zeros(n)
    cols = np.arange(2 * half_width)
    for a in range(0, delay.size, _PLACE_BLOCK):
        b = min(a + _PLACE_BLOCK, delay.size)
        # the kernel by linear interpolation between tabulated rows, times the image's gain
        taps = diff[row[a:b]]
        taps *= gr[a:b, None]
        tg = rows[row[a:b]]
        tg *= g[a:b, None]
        taps += tg
        start = start_all[a:b]
        idx = start[:, None] + cols
        if start[0] >= 0 and np.all(idx < n) and np.all(start >= 0):
            np.add.at(out, idx.ravel(), taps.ravel())
        else:
            ok = (idx >= 0) & (idx < n)
            np.add.at(out, idx[ok], taps[ok])
    return out


def _scatter(start: np.ndarray, taps: np.ndarray, amp: np.ndarray, n_fft: int) -> np.ndarray:
    """Σ over images of taps ⊗ band amplitudes, placed at their sample indices: (B, n_fft).

    One sparse (n_fft × N) placement matrix times the dense (N × B) band
    amplitudes; indices wrap circularly (the FFT frame is padded for that).
    """
    from scipy import sparse

    n_img, width = taps.shape
    if n_img == 0:
        return np.zeros((amp.shape[1], n_fft))
    idx = (start[:, None] + np.arange(width)[None, :]) % n_fft
    mat = sparse.csc_matrix(
        (taps.ravel(), idx.ravel(), np.arange(0, n_img * width + 1, width)), shape=(n_fft, n_img)
    )
    return np.ascontiguousarray((mat @ amp).T)
