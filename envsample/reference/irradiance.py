"""Exact reference irradiance of a piecewise-constant lat-long map (the boundary form, Arvo 1995).

Public objects
--------------
:func:`reference_irradiance`   exact irradiance of a piecewise-constant lat-long map.
:func:`reference_accuracy`     self-checks of that computation, for the verify report.
:func:`cell_cosine_integrals`  closed form of the unclamped cosine integral over every cell.
:func:`first_moment`           ``integral of L(w) w dw`` of a map (world axes).
:data:`KERNELS`                the compiled-kernel switch (``KERNELS.backend_name()``).

The map is a piecewise-constant function
-----------------------------------------
Everything here treats the map the way :meth:`envsample.sampling.table.EnvTable.eval` does:
pixel ``(i, j)`` has constant radiance over its cell, ``theta`` in ``[pi i/H, pi (i+1)/H]``
and ``phi`` in ``[2 pi j/W - pi, 2 pi (j+1)/W - pi]`` (plus the map rotation), in the
direction convention of :mod:`envsample.core.sphere`.  Write ``mu = cos(theta)``; the
solid-angle measure is ``d omega = d mu d phi``.  Internally directions are expressed
in the map's frame ``(x, y, z) = (w.forward_R, w.right_R, w.up)`` with
``forward_R = cos R forward + sin R right`` (R the rotation), so that
``w = (sin theta cos phi, sin theta sin phi, cos theta)`` with the unrotated ``phi``
(:mod:`envsample.reference.grid`).

Irradiance ``E(n) = integral of L(w) max(0, n.w) dw`` (map units times steradians).

Closed form of one cell, unclamped (:func:`cell_cosine_integrals`).  With
``n = (n_x, n_y, n_z)`` in the map frame,
``n.w = sqrt(1 - mu^2) (n_x cos phi + n_y sin phi) + n_z mu``, and

    int_cell n.w dw = (n_x (sin phi1 - sin phi0) - n_y (cos phi1 - cos phi0)) * S
                      + n_z (mu0^2 - mu1^2) / 2 * (phi1 - phi0),

    S = int_{mu1}^{mu0} sqrt(1 - mu^2) d mu = int_{theta0}^{theta1} sin^2 t dt
      = ((theta1 - theta0) - (sin theta1 cos theta1 - sin theta0 cos theta0)) / 2.

Clamping, exactly.  Cells wholly above the horizon of ``n`` would use that formula,
cells below give zero and cells cut by the horizon need clipping.  Rather than clip
cell by cell we use the vector form of Stokes' theorem on the unit sphere,
``int_R w dA = 1/2 * closed integral over the boundary of R of w x dl`` (boundary
oriented counter-clockwise seen from outside), the identity behind Lambert's
formula for polygonal luminaires (Arvo 1995).  Apply it to every lit cell piece
``cell ∩ {n.w > 0}`` and dot with ``n``.  The boundary of a lit piece consists of
(a) the lit parts of the cell's edges and (b) arcs of the horizon great circle,
where ``w x dl = n |dl|``.  Summing ``L_cell`` times that over all cells, each cell
edge appears twice with opposite orientations, so

    E(n) = 1/2 * sum over latitude edges  (L_above - L_below) * n . int_lit (w x dl)
         + 1/2 * sum over meridian edges  (L_right - L_left)  * n . int_lit (w x dl)
         + 1/2 * integral along the horizon of L(w) dl.

On a latitude circle ``mu`` (``s = sqrt(1 - mu^2)``), ``n.(w x dl) =
(-mu s (n_x cos phi + n_y sin phi) + n_z s^2) d phi`` and the lit part is the single
interval ``|phi - phi_n| < beta = arccos(-n_z mu / (n_h s))`` (``n_h = hypot(n_x, n_y)``).
On a meridian ``phi``, ``n.(w x dl) = (n_y cos phi - n_x sin phi) d theta`` and the
lit part is one interval ``[0, theta_c)`` or ``(theta_c, pi]``.  Both integrals are
read off per-row and per-column prefix sums (cumulative functions that are exact
antiderivatives, piecewise in the cells), so an edge costs O(1) per normal whatever
the map resolution.  The horizon term is a 1D integral of a piecewise-constant
function along a great circle: its crossings with the 2(H-1) latitude circles and
the W half-meridians are known in closed form, and each arc between consecutive
crossings lies in one cell.  The cost is O(H + W) per normal (plus a sort in the numpy
code) instead of O(H W).

Two implementations
-------------------
The compiled kernel (``envsample/reference/_kernels.c``, used whenever it is built)
streams the map row by row: each row's prefix sums are built once (float64, about 140 kB
per 1000 columns) and read by every normal while they are in cache; the jump of a
latitude edge is split between its two rows, and the meridian segments of a row that
are wholly lit are one prefix difference.  Along the horizon, which is a graph over the
relative azimuth ``psi = phi - phi_n`` when ``n_z != 0``, the angle
``sigma = atan2(-cos psi, |n_z| |sin psi|)`` measures arc length on each half, and the
crossings with latitude edges (``|psi| = beta``) come in order with the meridians, so
no sort is needed.  It exploits the exact structure: ``beta``, its arccos and the
horizon's ``sigma`` at each latitude edge depend only on ``n_z`` and are computed once per
group of normals that share it (a row of a lat-long grid of normals); rows wholly below
a normal's horizon are skipped, wholly lit rows use the row totals, and a constant row
needs one closed-form term per edge and one for its horizon arcs.  The map is cut into
:data:`ROW_SHARES` fixed row ranges run on a pool of threads (the kernel releases the GIL)
and their float64 results are summed in a fixed order, so results are bit-identical for
any number of threads and any batch of normals.  Memory: the map as given plus about
400 bytes per normal.  The numpy code (:mod:`envsample.reference.boundary`,
``ENVSAMPLE_KERNELS=numpy`` or ``backend="numpy"``) evaluates the same formula with
column prefix sums of the whole map (24 bytes per cell) and sorted crossings; the two
agree to about 1e-13 relative (``tests/reference/test_irradiance.py``).  Speeds are in
README's speed table (``benchmarks/bench_reference.py``).

Accuracy: the result is the exact integral of the piecewise-constant map up to
floating-point rounding; no quadrature or subdivision is involved.  Coincidences
(the horizon running along the equator or along a meridian edge, as for axis-aligned
normals) are resolved exactly: a horizon arc lying on a cell edge goes to the lit side,
and a normal within :data:`SNAP_RADIANS` (1e-9 rad) of such a direction is first moved
onto it, because at distances of the order of the rounding error the edge tests and the
arc tests of the numpy code could disagree; the move changes E by at most its length
times the integral of ``|L|``.  The compiled kernel derives the lit intervals, the cut
meridians and the cells of the horizon arcs from one set of column indices per (normal,
edge), so they agree whatever the rounding.  The tests agree with adaptive quadrature
(``scipy.integrate``, cell by cell) to 1e-11 relative, and near-degenerate normals to the
1e-9 bound.  :func:`reference_accuracy` reports a self-consistency residual based on
the exact identity ``E(n) - E(-n) = n . integral of L(w) w dw`` (the right-hand side
from the unclamped closed form), the bound of the snapping actually done and, if the map
was reduced with ``size``, the change against the full-resolution map.

The glossy reference is in :mod:`envsample.reference.glossy`, the order-2 spherical
harmonics (an approximation, never the reference) in :mod:`envsample.reference.sh9`.

These are reference values for asset preparation, not certified lighting calculations.

References
----------
- Arvo, J. (1995). Applications of Irradiance Tensors to the Simulation of
  Non-Lambertian Phenomena. SIGGRAPH 95 (Stokes' theorem on the sphere; Lambert's
  formula for the irradiance of a polygon).
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from envsample.core.compat import renamed_keywords
from envsample.core.sphere import row_solid_angles
from envsample.reference.boundary import chunk_size, irradiance_numpy
from envsample.reference.grid import KERNELS, Grid, map_array, map_frame, prepare_map, thread_count, unit_normals

__all__ = [
    "reference_irradiance",
    "reference_accuracy",
    "cell_cosine_integrals",
    "first_moment",
    "KERNELS",
    "SNAP_RADIANS",
    "ROW_SHARES",
]

#: Normals closer than this (radians) to a direction whose horizon runs along a cell edge
#: (the up axis, the horizontal plane, a meridian plane of a column edge) are moved onto
#: it, so the coincidence is resolved exactly; E moves by at most the move x integral of |L|.
SNAP_RADIANS = 1e-9

#: Fixed row ranges of the compiled path, run in parallel and summed in this order: the
#: partition depends on the map height only, so results do not depend on the thread count.
ROW_SHARES = 16

#: Normals per call of the compiled kernel (its partial sums take ROW_SHARES x 24 bytes each).
_COMPILED_BATCH = 65_536

#: Normals whose n_h = hypot(n_x, n_y) is within this of sqrt(1 - n_z^2) share that value, so
#: normals with one n_z (a row of a lat-long grid) form one group of the compiled kernel.
_GROUP_TOLERANCE = 1e-15

@renamed_keywords(rotate_deg="rotation_deg")
def cell_cosine_integrals(height: int, width: int, normal, *, up: str = "y", rotation_deg: float = 0.0) -> np.ndarray:
    """Unclamped ``int_cell n.w dw`` over every cell of an H x W map, closed form, float64 (H, W).

    ``normal`` is one unit vector (3,) in world space; cells follow :mod:`envsample.sphere`
    (up axis ``up``, rotation ``rotation_deg`` degrees).  The formula is in the module
    docstring; summed over cells it gives 0 (the sphere's first moment), and over the
    cells of the upper hemisphere of ``n = up`` it gives pi.  Units: steradians.
    """
    n, _ = unit_normals(np.asarray(normal, dtype=np.float64).reshape(1, 3), "normal")
    g = Grid(int(height), int(width))
    nx, ny, nz = map_frame(up, rotation_deg) @ n[0]
    S1 = 0.5 * (np.diff(g.theta) - np.diff(g.s * g.mu))  # int sin^2 theta d theta per row
    mu2 = -0.5 * np.diff(g.mu * g.mu)  # (mu0^2 - mu1^2) / 2 per row
    col = nx * np.diff(g.sph) - ny * np.diff(g.cph)
    return S1[:, None] * col[None, :] + nz * mu2[:, None] * g.dphi


@renamed_keywords(rotate_deg="rotation_deg")
def first_moment(rgb, *, up: str = "y", rotation_deg: float = 0.0) -> np.ndarray:
    """``integral of L(w) w dw`` of the piecewise-constant map, float64 (3 world axes, 3 channels).

    Closed form per cell (see :func:`cell_cosine_integrals`).  Units: map units x sr.
    For every unit normal, ``E(n) - E(-n) = n @ first_moment(...)`` exactly.
    """
    L = map_array(rgb)
    return map_frame(up, rotation_deg).T @ _map_sums(L)[0]


#: Rows of the map converted to float64 at a time by :func:`_map_sums` (about 48 MB at 8192 columns).
_SUM_ROWS = 256


def _map_sums(L: np.ndarray, backend: str = "auto"):
    """One float64 pass over the map: its first moment in the map frame (3, 3), the solid-angle
    integral of |L| per channel (3,) and the sum of |L| over the pixels (3,)."""
    H, W = L.shape[:2]
    g = Grid(H, W)
    S1 = 0.5 * (np.diff(g.theta) - np.diff(g.s * g.mu))  # int sin^2 theta d theta per row
    mu2 = -0.5 * np.diff(g.mu * g.mu) * g.dphi
    omega = row_solid_angles(H, W)
    mod = KERNELS.kernels(backend)
    if mod is not None and L.dtype in (np.float32, np.float64):
        rows = np.empty((H, 4, 3))
        mod.row_sums(np.ascontiguousarray(L), int(L.dtype == np.float64), H, W,
                     np.ascontiguousarray(np.concatenate([g.cph, g.sph]), dtype=np.float64), rows)
        moment = np.stack([S1 @ rows[:, 0], S1 @ rows[:, 1], mu2 @ rows[:, 2]])
        return moment, omega @ rows[:, 3], rows[:, 3].sum(axis=0)
    cols = np.stack([np.diff(g.sph), -np.diff(g.cph), np.ones(W)], axis=1)  # (W, 3) column weights
    # (W*3, 9): row j*3+c, column k*3+c holds cols[j, k], so one matrix product of the
    # contiguous (rows, W*3) block gives every weighted row sum per channel.
    weights = np.kron(cols, np.eye(3))
    moment, power, total = np.zeros((3, 3)), np.zeros(3), np.zeros(3)
    for a in range(0, H, _SUM_ROWS):
        b = min(H, a + _SUM_ROWS)
        block = L[a:b].reshape(b - a, 3 * W).astype(np.float64)
        rows = (block @ weights).reshape(b - a, 3, 3)  # (rows, weight, channel)
        moment[0] += S1[a:b] @ rows[:, 0]
        moment[1] += S1[a:b] @ rows[:, 1]
        moment[2] += mu2[a:b] @ rows[:, 2]
        np.abs(block, out=block)
        absrows = block @ weights[:, 6:9]
        power += omega[a:b] @ absrows
        total += absrows.sum(axis=0)
    return moment, power, total


def _snap_normals(g: Grid, n: np.ndarray) -> np.ndarray:
    """Move map-frame normals within SNAP_RADIANS of a degenerate direction exactly onto it."""
    n = n.copy()
    nh = np.hypot(n[:, 0], n[:, 1])
    polar = nh < SNAP_RADIANS
    n[polar] = np.stack([np.zeros(polar.sum()), np.zeros(polar.sum()), np.sign(n[polar, 2])], axis=1)
    level = ~polar & (np.abs(n[:, 2]) < SNAP_RADIANS)
    if np.any(level):
        h = n[level, :2] / nh[level, None]
        # |n . u_j| with u_j the horizontal direction of meridian j: zero when n is normal to its plane.
        dots = h[:, 0:1] * g.cph[None, :-1] + h[:, 1:2] * g.sph[None, :-1]
        j = np.argmin(np.abs(dots), axis=1)
        near = np.abs(dots[np.arange(j.size), j]) < SNAP_RADIANS
        m = np.stack([-g.sph[j], g.cph[j]], axis=1)  # unit normal of meridian plane j (exact table values)
        sign = np.where(np.sum(h * m, axis=1) >= 0, 1.0, -1.0)[:, None]
        h = np.where(near[:, None], sign * m, h)
        n[level] = np.column_stack([h, np.zeros(h.shape[0])])
    return n


def _snap_moves(n_before: np.ndarray, n_after: np.ndarray) -> float:
    """Largest distance (chord, <= angle in radians) a normal was moved by the snapping."""
    return float(np.max(np.linalg.norm(n_after - n_before, axis=1))) if n_before.size else 0.0


def _normal_groups(n: np.ndarray):
    """Per normal (cos, sin) of its azimuth and group index; per group (n_z, n_h), for the kernel."""
    nz = n[:, 2]
    nh_raw = np.hypot(n[:, 0], n[:, 1])
    nh_of_z = np.sqrt((1.0 - nz) * (1.0 + nz))
    nh = np.where(np.abs(nh_raw - nh_of_z) <= _GROUP_TOLERANCE, nh_of_z, nh_raw)
    lit = nh_raw > 0.0
    safe = np.where(lit, nh_raw, 1.0)
    hxy = np.stack([np.where(lit, n[:, 0] / safe, 1.0), np.where(lit, n[:, 1] / safe, 0.0)], axis=1)
    keys, gid = np.unique(np.stack([nz + 0.0, nh], axis=1), axis=0, return_inverse=True)
    return (np.ascontiguousarray(hxy), np.ascontiguousarray(gid.reshape(-1), dtype=np.int64),
            np.ascontiguousarray(keys, dtype=np.float64))


def _irradiance_compiled(mod, L: np.ndarray, n: np.ndarray, g: Grid, chunk, threads: int) -> np.ndarray:
    """The compiled kernel over ROW_SHARES fixed row ranges, summed in order (deterministic)."""
    H, W = L.shape[:2]
    if L.dtype not in (np.float32, np.float64):
        L = L.astype(np.float32)
    L = np.ascontiguousarray(L)
    grid = np.ascontiguousarray(np.concatenate([g.mu, g.s, g.theta, g.cph, g.sph]), dtype=np.float64)
    shares = min(H, ROW_SHARES)
    bounds = [H * k // shares for k in range(shares + 1)]
    step = _COMPILED_BATCH if chunk is None else chunk_size(chunk, H, W)
    out = np.zeros((n.shape[0], 3), dtype=np.float64)
    pool = ThreadPoolExecutor(max_workers=min(threads, shares)) if threads > 1 and shares > 1 else None
    try:
        for a in range(0, n.shape[0], step):
            hxy, gid, groups = _normal_groups(n[a:a + step])
            parts = np.empty((shares, gid.size, 3), dtype=np.float64)

            def run(k, hxy=hxy, gid=gid, groups=groups, parts=parts):
                mod.irradiance_rows(L, int(L.dtype == np.float64), H, W, grid, hxy, gid, groups,
                                    bounds[k], bounds[k + 1], parts[k])

            if pool is None:
                for k in range(shares):
                    run(k)
            else:
                list(pool.map(run, range(shares)))
            acc = parts[0].copy()
            for k in range(1, shares):  # a fixed order: the same sums whatever the threads did
                acc += parts[k]
            out[a:a + step] = acc
    finally:
        if pool is not None:
            pool.shutdown()
    return out


def _irradiance(L: np.ndarray, n_world: np.ndarray, frame: np.ndarray, chunk, *, backend: str = "auto",
                threads=None) -> np.ndarray:
    """E for world normals (N, 3): snap in the map frame, then the compiled kernel or numpy."""
    mod = KERNELS.kernels(backend)
    threads = thread_count(threads)
    g = Grid(L.shape[0], L.shape[1])
    n_map = n_world @ frame.T
    n = _snap_normals(g, n_map)
    if mod is None:
        return irradiance_numpy(L, n, chunk)
    return _irradiance_compiled(mod, L, n, g, chunk, threads)


@renamed_keywords(rotate_deg="rotation_deg")
def reference_irradiance(rgb, normals, *, up: str = "y", rotation_deg: float = 0.0, size=None,
                         chunk: int | None = None, backend: str = "auto", threads: int | None = None) -> np.ndarray:
    """Exact irradiance ``E(n) = integral of L(w) max(0, n.w) dw`` of a map, float64 ``normals.shape``.

    Parameters
    ----------
    rgb : array_like (H, W, 3) or MapImage
        Linear radiance, taken as constant over each equirectangular cell (the
        convention of :mod:`envsample.core.sphere`; ``EnvTable.eval`` reads it the same way).
        Any float dtype; computed in float64.  Negative values are integrated as given.
    normals : array_like (..., 3)
        Unit normals, world space (float64; lengths within 1e-6 of 1 are renormalised).
    up : {"y", "z"}
        World up axis of the map.
    rotation_deg : float
        Rotation of the map about the up axis, degrees.
    size : (width, height) or "WxH", optional
        First reduce the map with the table's power-preserving box filter
        (:func:`envsample.core.latlong.reduce_power`); the result is then exact for the reduced map.
    chunk : int, optional
        Normals per batch (default: 65536 for the compiled kernel; for numpy, chosen to keep
        temporaries near 150 MB).  Results do not depend on it.
    backend : {"auto", "compiled", "numpy"}
        The compiled kernel if built ("auto"), it or an error ("compiled"), or the numpy
        code.  ``ENVSAMPLE_KERNELS=numpy`` makes "auto" mean numpy.
    threads : int, optional
        Threads of the compiled kernel (default: the CPUs this process may use).  Results
        are bit-identical for any value.

    Returns
    -------
    ndarray float64, shape ``normals.shape``: irradiance per channel, map units x steradians
    (a uniform map of radiance L gives pi L).

    Notes
    -----
    Exact up to floating-point rounding for the piecewise-constant map (Stokes'
    theorem on the sphere, Arvo 1995; derivation in the module docstring), in
    O(H + W) operations per normal plus O(H W) per batch of normals.  Deterministic.
    """
    L = prepare_map(rgb, size)
    n, lead = unit_normals(normals)
    out = _irradiance(L, n, map_frame(up, rotation_deg), chunk, backend=backend, threads=threads)
    return out.reshape(lead + (3,))


@renamed_keywords(rotate_deg="rotation_deg")
def reference_accuracy(rgb, normals, *, up: str = "y", rotation_deg: float = 0.0, size=None,
                       chunk: int | None = None, max_normals: int = 64, backend: str = "auto",
                       threads: int | None = None) -> dict:
    """Accuracy statement for :func:`reference_irradiance`, JSON-ready.

    Keys
    ----
    ``method``: short description.  ``resolution``: ``[width, height]`` used.
    ``identity_residual``: max over (up to ``max_normals``, evenly chosen) normals of
    ``|E(n) - E(-n) - n . first_moment| / scale`` with ``scale = max(pi * mean |L|, tiny)``;
    the identity is exact, so this measures the rounding of the clipping machinery.
    ``resolution_change``: when ``size`` reduces the map, max ``|E_size - E_full| / scale``
    over the same normals (the error caused by the reduction), else ``None``.
    ``snap_bound``: the largest distance by which the snapping moved any of ``normals``
    (at most :data:`SNAP_RADIANS`; 0 when none needed it) times ``integral of |L| dw / scale``,
    a bound on what that move changes (``|max(0, n.w) - max(0, n'.w)| <= |n - n'|``).
    ``relative_error_bound``: the largest of the three (a conservative statement for the report).
    ``backend``: "compiled" or "numpy", the code that computed the values.
    """
    full = map_array(rgb)
    L = prepare_map(full, size, checked=True)
    n, _ = unit_normals(normals)
    frame = map_frame(up, rotation_deg)
    g = Grid(L.shape[0], L.shape[1])
    n_map = n @ frame.T
    move = _snap_moves(n_map, _snap_normals(g, n_map))
    if n.shape[0] > max_normals:
        n = n[np.linspace(0, n.shape[0] - 1, max_normals).round().astype(np.int64)]
    kw = {"backend": backend, "threads": threads}
    both = _irradiance(L, np.concatenate([n, -n]), frame, chunk, **kw)
    e_pos, e_neg = both[: n.shape[0]], both[n.shape[0]:]
    moment_map, power_c, total_c = _map_sums(L, backend)
    scale = max(math.pi * float(np.sum(total_c)) / L.size, 1e-300)
    moment = frame.T @ moment_map
    resid = float(np.max(np.abs(e_pos - e_neg - n @ moment))) / scale if n.size else 0.0
    change = None
    if L.shape != full.shape:
        e_full = _irradiance(full, n, frame, chunk, **kw)
        change = float(np.max(np.abs(e_pos - e_full))) / scale if n.size else 0.0
    snap = move * float(np.max(power_c)) / scale
    return {
        "method": "exact integral of the piecewise-constant map (boundary form of Stokes' theorem)",
        "resolution": [int(L.shape[1]), int(L.shape[0])],
        "identity_residual": resid,
        "resolution_change": change,
        "snap_bound": snap,
        "relative_error_bound": max(resid, change or 0.0, snap),
        "backend": KERNELS.backend_name() if backend == "auto" else backend,
    }
