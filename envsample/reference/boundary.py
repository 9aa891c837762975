"""The numpy implementation of the exact reference irradiance (the fallback of the compiled kernel).

:func:`irradiance_numpy` evaluates the boundary form derived in
:mod:`envsample.reference.irradiance` (Stokes' theorem on the sphere, Arvo 1995) with
vectorised numpy over batches of normals: per-edge prefix sums of the latitude-edge jumps
(built in blocks of about 64 MB), float64 column prefix sums of the map for the meridian
edges (24 bytes per cell) and, for the horizon, its crossings with every latitude circle
and half-meridian, sorted along the great circle.  It costs O((H + W) log(H + W)) per
normal plus O(H W) per block of edges; the compiled kernel
(``envsample/reference/_kernels.c``) streams the map row by row instead and is used
whenever it is built (``ENVSAMPLE_KERNELS=numpy`` forces this code).

The normals arrive in the map frame, already snapped (see
:func:`envsample.reference.irradiance.reference_irradiance`).  Results are float64 and
bit-identical between runs and for any batch size.
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.sphere import orthonormal_basis
from envsample.reference.grid import TWO_PI, Grid

__all__ = ["irradiance_numpy", "chunk_size"]

#: Work per chunk of normals, in (normals x (2H + W)) elements; bounds temporaries to ~150 MB.
_CHUNK_ELEMENTS = 1_000_000

#: Bytes of float64 latitude-edge tables built at a time (rows of edges per block follow from it).
_LAT_BLOCK_BYTES = 64_000_000


class _IrradianceTables:
    """What every normal needs: the map (as given) and float64 column prefix sums of it.

    ``colsum[i, j] = sum of L[i', j] for i' < i`` ((H+1) x W x 3): the prefix sums of the
    meridian-edge jumps ``L[:, j] - L[:, j-1]`` are differences of two columns of it.
    The latitude-edge tables are larger (12 floats per cell) and are built block by
    block (:func:`_latitude_block`), so memory stays near 24 bytes per cell.
    """

    def __init__(self, L: np.ndarray):
        H, W = L.shape[:2]
        self.grid = Grid(H, W)
        self.L = L
        self.L_flat = L.reshape(H * W, 3)
        colsum = np.zeros((H + 1, W, 3))
        np.cumsum(L, axis=0, dtype=np.float64, out=colsum[1:])
        self.colsum = colsum.reshape((H + 1) * W, 3)


def _latitude_block(T: _IrradianceTables, k0: int, k1: int):
    """Tables of latitude edges k0..k1-1 (k = 1..H-1 is the edge between rows k-1 and k).

    Jump ``D = L(row k-1) - L(row k)``; along the edge, the cumulative functions of phi for
    the weights cos phi, sin phi and 1 are exact antiderivatives: in cell j their value at
    phi is ``offset + D sin(phi)`` (resp. ``- D cos(phi)``, ``+ D phi``).  Returns the records
    (rows x W, 12: three offsets and D, per channel) and the full-circle totals (rows, 3, 3).
    """
    g = T.grid
    W = g.W
    lat = np.empty((k1 - k0, W, 4, 3))
    D = lat[:, :, 3]
    np.subtract(T.L[k0 - 1:k1 - 1], T.L[k0:k1], out=D, dtype=np.float64)
    weights = ((np.diff(g.sph), g.sph, -1.0), (-np.diff(g.cph), g.cph, 1.0), (np.full(W, g.dphi), g.phi, -1.0))
    totals = []
    for f, (w, edge, sign) in enumerate(weights):
        out = lat[:, :, f]
        np.multiply(D, w[None, :, None], out=out)
        np.cumsum(out, axis=1, out=out)  # inclusive prefix I(j)
        totals.append(out[:, -1].copy())
        out += sign * D * edge[None, 1:, None]  # offset = I(j) -/+ D * edge(j+1)
    return lat.reshape((k1 - k0) * W, 12), np.stack(totals, axis=1)


def _latitude_x(g: Grid, nz, nh, k0: int, k1: int):
    """cos of the half-width of the lit interval on latitude edges k0..k1-1, (M, k1-k0).

    ``x = -n_z mu / (n_h s)``; with ``n_h = 0`` it is set to -2 (all lit) or 2 (none lit).
    """
    mu, s = g.mu[k0:k1][None, :], g.s[k0:k1][None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        x = -(nz[:, None] * mu) / (nh[:, None] * s)
    return np.where(nh[:, None] == 0.0, np.where(nz[:, None] * mu > 0.0, -2.0, 2.0), x)


def _latitude_terms(T: _IrradianceTables, rec, totals, k0, k1, nx, ny, nz, nh, phin):
    """1/2 sum over latitude edges k0..k1-1 of jump x integral over the lit interval, (M, 3)."""
    g = T.grid
    W = g.W
    mu, s = g.mu[k0:k1], g.s[k0:k1]
    beta = np.arccos(np.clip(_latitude_x(g, nz, nh, k0, k1), -1.0, 1.0))
    wC = -(mu * s)[None, :] * nx[:, None]
    wS = -(mu * s)[None, :] * ny[:, None]
    w1 = (s * s)[None, :] * nz[:, None]
    k = np.arange(k1 - k0)[None, :]
    total = wC[..., None] * totals[None, :, 0] + wS[..., None] * totals[None, :, 1] + w1[..., None] * totals[None, :, 2]

    def value(phi):
        q = np.floor((phi + math.pi) / TWO_PI)
        p = phi - TWO_PI * q
        j = np.clip(np.floor((p + math.pi) / g.dphi).astype(np.int64), 0, W - 1)
        r = rec[k * W + j]  # (M, rows, 12)
        v = wC[..., None] * (r[..., 0:3] + r[..., 9:12] * np.sin(p)[..., None]) \
            + wS[..., None] * (r[..., 3:6] - r[..., 9:12] * np.cos(p)[..., None]) \
            + w1[..., None] * (r[..., 6:9] + r[..., 9:12] * p[..., None])
        return v + q[..., None] * total

    phic = phin[:, None]
    return 0.5 * np.sum(value(phic + beta) - value(phic - beta), axis=1)


def _meridian_terms(T: _IrradianceTables, nx, ny, nz):
    """1/2 sum over meridian edges of jump x lit length x n.(w x t); also theta_c. (M, 3)."""
    g = T.grid
    H, W = g.H, g.W
    c = nx[:, None] * g.cph[None, :-1] + ny[:, None] * g.sph[None, :-1]
    nm = -nx[:, None] * g.sph[None, :-1] + ny[:, None] * g.cph[None, :-1]
    sgn = np.sign(nz)[:, None]
    thc = np.arctan2(np.abs(nz)[:, None] + 0.0 * c, -sgn * c)  # horizon crossing on each meridian
    i = np.clip(np.floor(thc * (H / math.pi)).astype(np.int64), 0, H - 1)
    j = np.arange(W)[None, :]
    jl = (j - 1) % W
    # Jump G = L(col j) - L(col j-1); cumulative in theta: dtheta * (prefix difference) + G (theta - theta_i).
    G = T.L_flat[i * W + j].astype(np.float64) - T.L_flat[i * W + jl]
    pre = T.colsum[i * W + j] - T.colsum[i * W + jl]
    cum = (math.pi / H) * pre + G * (thc - g.theta[i])[..., None]
    tot = (math.pi / H) * (T.colsum[H * W + j] - T.colsum[H * W + jl])
    val = np.where((sgn > 0)[..., None], cum,
                   np.where((sgn < 0)[..., None], tot - cum, np.where((c > 0)[..., None], tot, 0.0)))
    return 0.5 * np.einsum("mj,mjc->mc", nm, val), thc


def _horizon_term(T: _IrradianceTables, n, nh, thc):
    """1/2 integral of L along the horizon great circle of each normal, exact. (M, 3)."""
    g = T.grid
    H, W = g.H, g.W
    nx, ny, nz = n[:, 0], n[:, 1], n[:, 2]
    x = _latitude_x(g, nz, nh, 1, H)
    e1, e2 = orthonormal_basis(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        hx, hy = nx / nh, ny / nh
    hx = np.where(nh > 0, hx, 1.0)
    hy = np.where(nh > 0, hy, 0.0)
    # Components of the unit vectors h = (hx, hy, 0), h_perp = (-hy, hx, 0), z on e1 and e2.
    parts = []
    for e in (e1, e2):
        parts.append((hx * e[:, 0] + hy * e[:, 1], -hy * e[:, 0] + hx * e[:, 1], e[:, 2]))
    mu, s = g.mu[1:-1][None, :], g.s[1:-1][None, :]
    ok = (np.abs(x) < 1.0) & (nh[:, None] > 0.0)
    xc = np.where(ok, x, 0.0)
    sb = np.sqrt((1.0 - xc) * (1.0 + xc))
    taus = []
    for sign in (1.0, -1.0):
        d1 = s * xc * parts[0][0][:, None] + sign * s * sb * parts[0][1][:, None] + mu * parts[0][2][:, None]
        d2 = s * xc * parts[1][0][:, None] + sign * s * sb * parts[1][1][:, None] + mu * parts[1][2][:, None]
        taus.append(np.where(ok, np.arctan2(d2, d1), np.nan))
    # Meridian half-planes (only when the horizon avoids the poles) and the poles themselves.
    st, ct = np.sin(thc), np.cos(thc)
    cph, sph = g.cph[None, :-1], g.sph[None, :-1]
    q1 = st * (cph * e1[:, 0:1] + sph * e1[:, 1:2]) + ct * e1[:, 2:3]
    q2 = st * (cph * e2[:, 0:1] + sph * e2[:, 1:2]) + ct * e2[:, 2:3]
    taus.append(np.where((nz != 0.0)[:, None], np.arctan2(q2, q1), np.nan))
    pole = np.stack([np.arctan2(e2[:, 2], e1[:, 2]), np.arctan2(-e2[:, 2], -e1[:, 2])], axis=1)
    taus.append(np.where((nz == 0.0)[:, None], pole, np.nan))
    # Row change when the horizon passes each crossing in the direction of increasing tau:
    # dP/dtau = n x P (e1 x e2 = n), whose up component at P+- is +-n_h s sqrt(1 - x^2), so
    # P+ climbs into the row above (-1) and P- descends (+1); meridians and poles: 0.
    M = n.shape[0]
    steps = [np.full((M, H - 1), -1), np.full((M, H - 1), 1), np.zeros((M, W), dtype=np.int64),
             np.zeros((M, 2), dtype=np.int64)]
    allt = np.concatenate(taus, axis=1)
    order = np.argsort(allt, axis=1)
    t = np.take_along_axis(allt, order, axis=1)
    K = np.sum(~np.isnan(t), axis=1)
    idx = np.arange(t.shape[1])[None, :]
    valid = idx < K[:, None]
    t = np.where(valid, t, 0.0)
    drow = np.where(valid, np.take_along_axis(np.concatenate(steps, axis=1), order, axis=1), 0)
    nxt = np.empty_like(t)
    nxt[:, :-1] = t[:, 1:]
    last = (idx == (K - 1)[:, None])
    nxt = np.where(last, t[:, :1] + TWO_PI, nxt)
    length = np.where(valid, nxt - t, 0.0)
    mid = t + 0.5 * length
    cm, sm = np.cos(mid), np.sin(mid)
    wx = cm * e1[:, 0:1] + sm * e2[:, 0:1]
    wy = cm * e1[:, 1:2] + sm * e2[:, 1:2]
    wz = cm * e1[:, 2:3] + sm * e2[:, 2:3]
    row = _walk_rows(g, t, valid, K, drow, ok, n, e1, e2)
    polar = nh == 0.0  # horizon on the equator: no latitude crossings, ties go to the lit side
    if np.any(polar):
        row[polar] = _classify_rows(g, wx[polar], wy[polar], wz[polar], nz[polar][:, None])
    col = _classify_cols(g, wx, wy, nx[:, None], ny[:, None])
    # A horizontal normal's horizon is two half-meridians, at +-a with a = (-n_y, n_x, 0);
    # classify those two directions once (ties to the lit side) rather than each midpoint,
    # which may sit within rounding of a meridian edge the horizon runs along.
    flat = nz == 0.0
    if np.any(flat):
        ax, ay = -ny[flat], nx[flat]  # not normalised: keeps the exact zero of a . m_j when n = m_j
        nxf, nyf = nx[flat][:, None], ny[flat][:, None]
        col_a = _classify_cols(g, ax[:, None], ay[:, None], nxf, nyf)
        col_b = _classify_cols(g, -ax[:, None], -ay[:, None], nxf, nyf)
        side = wx[flat] * ax[:, None] + wy[flat] * ay[:, None]
        col[flat] = np.where(side > 0, col_a, col_b)
    Lc = T.L_flat[np.where(valid, row * W + col, 0)]
    return 0.5 * np.einsum("mk,mkc->mc", length, Lc.astype(np.float64, copy=False))


def _walk_rows(g: Grid, t, valid, K, drow, ok, n, e1, e2):
    """Row of each horizon arc by counting latitude crossings from the horizon's highest point.

    Comparing an arc's midpoint with the edges fails where the horizon is nearly tangent
    to a latitude circle (the midpoint is then within rounding of it); counting does not.
    The highest point, ``z - n_z n``, lies below exactly the edges with mu > 0 that have no
    crossing (the same test that created the crossings).
    """
    top = np.array([0.0, 0.0, 1.0]) - n[:, 2:3] * n
    tau = np.arctan2(np.sum(top * e2, axis=1), np.sum(top * e1, axis=1))
    tau = np.where(tau < t[:, 0], tau + TWO_PI, tau)
    a = np.clip(np.sum(valid & (t <= tau[:, None]), axis=1) - 1, 0, np.maximum(K - 1, 0))
    D = np.cumsum(drow, axis=1)
    row_top = np.sum((g.mu[1:-1][None, :] > 0.0) & ~ok, axis=1)
    row = row_top[:, None] + D - np.take_along_axis(D, a[:, None], axis=1)
    return np.clip(row, 0, g.H - 1)


def _classify_rows(g: Grid, wx, wy, wz, nz):
    """Row of points on the horizon; a point exactly on a latitude edge goes to the lit side."""
    H = g.H
    th = np.arctan2(np.hypot(wx, wy), wz)
    r0 = np.clip(np.floor(th * (H / math.pi)).astype(np.int64), 0, H - 1)
    top, bot = g.mu[r0], g.mu[r0 + 1]
    row = r0 - (wz > top) + (wz < bot)
    row = np.where((wz == top) & (r0 > 0) & (nz > 0), r0 - 1, row)
    row = np.where((wz == bot) & (r0 < H - 1) & (nz < 0), r0 + 1, row)
    return np.clip(row, 0, H - 1)


def _classify_cols(g: Grid, wx, wy, nx, ny):
    """Column of points on the horizon; a point exactly on a meridian edge goes to the lit side."""
    W = g.W
    ph = np.arctan2(wy, wx)
    c0 = np.floor((ph + math.pi) / g.dphi).astype(np.int64) % W
    sL = -wx * g.sph[c0] + wy * g.cph[c0]
    sR = -wx * g.sph[c0 + 1] + wy * g.cph[c0 + 1]
    nL = -nx * g.sph[c0] + ny * g.cph[c0]
    nR = -nx * g.sph[c0 + 1] + ny * g.cph[c0 + 1]
    col = c0 - (sL < 0) + ((sL >= 0) & (sR > 0))
    col = np.where((sL == 0) & (nL <= 0), c0 - 1, col)
    col = np.where((sR == 0) & (sL > 0) & (nR > 0), c0 + 1, col)
    return col % W


def chunk_size(chunk, grid_h: int, grid_w: int) -> int:
    """Normals per batch: ``chunk`` checked (a positive integer), or about 1e6 / (2H + W) when None."""
    if chunk is None:
        return max(1, _CHUNK_ELEMENTS // (2 * grid_h + grid_w + 2))
    chunk = int(chunk)
    if chunk < 1:
        raise ValueError(f"chunk must be a positive number of normals, got {chunk}")
    return chunk


def irradiance_numpy(L: np.ndarray, n: np.ndarray, chunk=None) -> np.ndarray:
    """E(n) for map-frame, snapped unit normals (N, 3) float64; float64 (N, 3), map units x sr."""
    T = _IrradianceTables(L)
    g = T.grid
    nx, ny, nz = n[:, 0], n[:, 1], n[:, 2]
    nh = np.hypot(nx, ny)
    phin = np.arctan2(ny, nx)
    out = np.zeros((n.shape[0], 3), dtype=np.float64)
    step = chunk_size(chunk, g.H, g.W)
    chunks = [slice(a, a + step) for a in range(0, n.shape[0], step)]
    rows = max(1, _LAT_BLOCK_BYTES // (96 * g.W))
    for k0 in range(1, g.H, rows):
        k1 = min(g.H, k0 + rows)
        rec, totals = _latitude_block(T, k0, k1)
        for c in chunks:
            out[c] += _latitude_terms(T, rec, totals, k0, k1, nx[c], ny[c], nz[c], nh[c], phin[c])
        del rec
    for c in chunks:
        mer, thc = _meridian_terms(T, nx[c], ny[c], nz[c])
        out[c] += mer + _horizon_term(T, n[c], nh[c], thc)
    return out
