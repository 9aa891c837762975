"""One pass over a map for every check: :func:`scan_map` returns a :class:`MapScan`.

The checks need luminance, row sums and maxima per channel, a solid-angle-weighted histogram of
log-luminance, the extreme values and (for the ``sampling`` check) the map reduced to a small
table grid.  Computing each of them with whole-image numpy operations reads the 400 MB of an
8192x4096 float map a dozen times and allocates as many full-size temporaries; here the map is
read once, in bands of rows that fit in the processor's cache, each band turned into planar
channels so that every reduction runs along contiguous memory (measured: about half the time of
the table build on the same map, see ``benchmarks/bench_qa.py``).

Histogram: the bit pattern of a non-negative float32 is monotone in its value, so its top 17 bits
(8 exponent bits, 8 mantissa bits) are 2^17 ordered buckets, each 2^-8 (0.4 %) wide relative to
its value.  Quantiles read from it are exact to that width (IEEE 754-2008 binary32 layout).
Accumulations (row sums, histogram weights) are float64; solid angles are exact per row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from envsample.core.color import canonical_primaries
from envsample.core.constants import luminance_weights
from envsample.core.sphere import row_solid_angles

#: Bits dropped from a float32 bit pattern to form a histogram bucket (23 - 15 = 8 mantissa bits kept).
_SHIFT = 15
_BUCKETS = 1 << (32 - _SHIFT - 1)  # the sign bit is always 0 for the clamped values
#: Rows per band: 16 rows of an 8192-wide map are 1.5 MB of RGB float32 (measured fastest here).
_BAND_BYTES = 1 << 21


def srgb_decode(v: np.ndarray) -> np.ndarray:
    """sRGB code values in [0, 1] to linear (IEC 61966-2-1:1999, the piecewise EOTF)."""
    v = np.clip(v, 0.0, 1.0)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


class LogHistogram:
    """Solid-angle-weighted histogram of non-negative float32 values in 2^17 ordered buckets.

    ``weights[k]`` is the solid angle (sr) of the pixels in bucket ``k``; bucket 0 holds the
    zeros and the denormals below 2^15 x 2^-149 (about 4.6e-41), which count as no light.
    """

    def __init__(self, weights: np.ndarray):
        self.weights = weights
        self.cumulative = np.cumsum(weights)

    @property
    def total(self) -> float:
        return float(self.cumulative[-1])

    @staticmethod
    def bucket_value(k, *, upper: bool = False) -> np.ndarray:
        """The smallest value of bucket ``k`` (or the smallest of the next one with ``upper``)."""
        k = np.asarray(k, dtype=np.uint32) + np.uint32(1 if upper else 0)
        return (k << np.uint32(_SHIFT)).view(np.float32).astype(np.float64)

    def quantile(self, q: float, *, lit: bool = False) -> float:
        """The lower edge of the bucket where the weighted CDF reaches ``q`` in [0, 1].

        At most 2^-8 (0.4 %) below the exact weighted quantile, and exact for values with
        8 significant bits or fewer (1, 8, 0.75...).  With ``lit``, only pixels above zero
        count (bucket 0 left out): the percentiles of the lit part of a map with a black
        ground.  0.0 when nothing counts.
        """
        start = float(self.weights[0]) if lit else 0.0
        total = self.total - start
        if not total > 0:
            return 0.0
        target = start + min(max(q, 0.0), 1.0) * total
        k = int(np.searchsorted(self.cumulative, target, side="left"))
        k = min(max(k, 1 if lit else 0), self.cumulative.size - 1)
        while k > 0 and self.weights[k] == 0:  # rounding of the cumulative sum at an empty bucket
            k -= 1
        return float(self.bucket_value(k))

    def share_below(self, value: float) -> float:
        """Fraction of the solid angle with values below ``value`` (bucket resolution)."""
        if not self.total > 0:
            return 0.0
        k = int(np.asarray(np.float32(max(value, 0.0))).view(np.uint32) >> np.uint32(_SHIFT))
        return float(self.cumulative[k - 1]) / self.total if k > 0 else 0.0


@dataclass
class MapScan:
    """What one pass over a map measured (see :func:`scan_map`).

    Attributes
    ----------
    luminance : float32 (H, W) of the cleaned map, clamped at 0
    row_luminance_sum : float64 (H,) ; row_luminance_max : float32 (H,)
    row_channel_sum : float64 (H, 3) ; row_channel_max : float32 (H, 3), of the cleaned map
    histogram : LogHistogram of luminance, weighted by solid angle (sr)
    finite : bool, no NaN or Inf in the raw map ; nonnegative : bool, no value below 0
    raw_max : float, largest finite raw value (0.0 if none)
    reduced : float32 (h, w, 3) or None: the cleaned map reduced to ``reduce_to`` by the
        power-preserving box filter of :func:`envsample.core.latlong.reduce_power`, when the
        sizes divide (else None and the caller reduces)
    """

    luminance: np.ndarray
    row_luminance_sum: np.ndarray
    row_luminance_max: np.ndarray
    row_channel_sum: np.ndarray
    row_channel_max: np.ndarray
    histogram: LogHistogram
    finite: bool
    nonnegative: bool
    raw_max: float
    reduced: np.ndarray | None


def _luminance_planar(p: np.ndarray, key: str, w: np.ndarray | None, out: np.ndarray) -> np.ndarray:
    """Luminance of planar (3, r, W) channels into ``out`` (r, W) with weights ``w`` (float32 (3,)), clamped at 0."""
    if key == "max":
        np.maximum(p[0], p[1], out=out)
        np.maximum(out, p[2], out=out)
    elif key == "mean":
        np.add(p[0], p[1], out=out)
        out += p[2]
        out *= np.float32(1.0 / 3.0)
    else:
        np.einsum("c,crw->rw", w, p, out=out)  # one pass (measured faster than three multiply-adds)
    np.maximum(out, np.float32(0.0), out=out)
    return out


def _clean_planar(p: np.ndarray, row_max: np.ndarray, is_hdr: bool) -> tuple[bool, bool, float]:
    """Clean planar channels in place (NaN/Inf and negatives to 0; sRGB-decoded if not HDR) and their row maxima.

    ``row_max`` (3, r) holds the raw row maxima on entry (NaN if a row has a NaN) and the cleaned
    ones on return.  Returns (finite, non-negative, largest finite raw value).
    """
    finite = bool(np.isfinite(row_max).all())
    lo = float(p.min())
    finite = finite and math.isfinite(lo)
    nonneg = lo >= 0.0
    if finite:
        top = float(row_max.max())
    else:
        with np.errstate(invalid="ignore"):
            fin = np.isfinite(p)
            top = float(np.max(p, where=fin, initial=0.0))
            nonneg = bool(np.all(p >= 0, where=fin))
    if not (finite and nonneg):
        with np.errstate(invalid="ignore"):
            np.copyto(p, np.float32(0.0), where=~(np.isfinite(p) & (p > 0)))
    if not is_hdr:
        p[...] = srgb_decode(p)
    if not (finite and nonneg) or not is_hdr:
        np.max(p, axis=2, out=row_max)
    return finite, nonneg, top


def scan_map(raw: np.ndarray, *, primaries: str = "bt709", is_hdr: bool = True,
             reduce_to: tuple[int, int] | None = None) -> MapScan:
    """Read an (H, W, 3) float32 map once and measure what the checks need (see :class:`MapScan`).

    ``raw`` may hold NaN, Inf and negatives: they count as 0 light (and are reported by the
    ``nan``, ``inf`` and ``negative`` checks).  ``is_hdr=False`` sRGB-decodes the values first
    (IEC 61966-2-1).  ``reduce_to = (w, h)`` also returns the map reduced to that grid.
    """
    H, W = int(raw.shape[0]), int(raw.shape[1])
    key = canonical_primaries(primaries)
    weights_rgb = None if key in ("max", "mean") else luminance_weights(key).astype(np.float32)
    linear = weights_rgb is not None and bool((weights_rgb >= 0).all())
    rows = max(1, min(H, _BAND_BYTES // max(1, 12 * W)))
    fy = fx = None
    if reduce_to is not None:
        w, h = reduce_to
        if H % h == 0 and W % w == 0:
            fy, fx = H // h, W // w
            rows = max(fy, (rows // fy) * fy)
    sa = row_solid_angles(H, W)
    lum = np.empty((H, W), dtype=np.float32)
    row_lsum = np.empty(H)
    row_lmax = np.empty(H, dtype=np.float32)
    row_csum = np.empty((H, 3))
    row_cmax = np.empty((H, 3), dtype=np.float32)
    hist = np.zeros(_BUCKETS)
    planar = np.empty((3, rows, W), dtype=np.float32)
    band_max = np.empty((3, rows), dtype=np.float32)
    keys = np.empty((rows, W), dtype=np.uint32)
    weights = np.empty((rows, W))
    reduced = np.zeros((H // fy, W // fx, 3)) if fy else None
    finite = nonneg = True
    top = 0.0
    for r0 in range(0, H, rows):
        band = raw[r0:r0 + rows]
        r = band.shape[0]
        p, m = planar[:, :r], band_max[:, :r]
        np.copyto(p, band.transpose(2, 0, 1))
        np.max(p, axis=2, out=m)
        ok, pos, t = _clean_planar(p, m, is_hdr)
        finite &= ok
        nonneg &= pos
        top = max(top, t)
        row_cmax[r0:r0 + r] = m.T
        if fy:
            # Column blocks in float32 (fx values each), then float64: the row sums and the reduced map.
            blocks = _block_sums(p, fx)
            row_csum[r0:r0 + r] = blocks.sum(axis=2, dtype=np.float64).T
            _reduce_band(blocks, fy, sa[r0:r0 + r], out=reduced[r0 // fy:(r0 + r) // fy])
        else:
            row_csum[r0:r0 + r] = p.sum(axis=2, dtype=np.float64).T
        L = _luminance_planar(p, key, weights_rgb, lum[r0:r0 + r])
        if linear:
            # Positive weights: luminance is linear in the channels, its row sums follow from theirs.
            row_lsum[r0:r0 + r] = row_csum[r0:r0 + r] @ weights_rgb.astype(np.float64)
        else:
            row_lsum[r0:r0 + r] = L.sum(axis=1, dtype=np.float64)
        row_lmax[r0:r0 + r] = L.max(axis=1)
        k = keys[:r]
        np.right_shift(L.view(np.uint32), np.uint32(_SHIFT), out=k)
        np.bitwise_and(k, np.uint32(_BUCKETS - 1), out=k)  # -0.0 has the sign bit set: it is bucket 0
        wb = weights[:r]
        wb[...] = sa[r0:r0 + r, None]
        hist += np.bincount(k.ravel(), weights=wb.ravel(), minlength=_BUCKETS)
    out_reduced = None
    if fy:
        out_reduced = (reduced / row_solid_angles(H // fy, W // fx)[:, None, None]).astype(np.float32)
    return MapScan(luminance=lum, row_luminance_sum=row_lsum, row_luminance_max=row_lmax,
                   row_channel_sum=row_csum, row_channel_max=row_cmax, histogram=LogHistogram(hist),
                   finite=finite, nonnegative=nonneg, raw_max=top, reduced=out_reduced)


def _block_sums(p: np.ndarray, fx: int) -> np.ndarray:
    """Sums of ``fx`` neighbouring columns of planar (3, r, W) channels: (3, r, W // fx), float32 over at most
    ``fx`` values (``einsum``: measured several times faster here than ``sum(axis=-1)``)."""
    c, r, W = p.shape
    return np.einsum("ij->i", p.reshape(-1, fx)).reshape(c, r, W // fx)


def _reduce_band(blocks: np.ndarray, fy: int, sa: np.ndarray, *, out: np.ndarray) -> None:
    """Power-preserving box filter of a band (:func:`envsample.core.latlong.reduce_power` when sizes divide)
    from its column-block sums (3, r, w): sums of L x dOmega over fy rows in float64, into ``out`` (r // fy, w, 3)."""
    c, r, w = blocks.shape
    out[...] = (blocks.astype(np.float64) * sa[None, :, None]).reshape(c, r // fy, fy, w).sum(axis=2).transpose(1, 2, 0)
