"""Reference values for validation renders: exact irradiance, a glossy reference and SH9 irradiance.

Public objects
--------------
:func:`reference_irradiance`   exact irradiance of a piecewise-constant lat-long map.
:func:`reference_accuracy`     self-checks of that computation, for the verify report.
:func:`cell_cosine_integrals`  closed form of the unclamped cosine integral over every cell.
:func:`first_moment`           ``integral of L(w) w dw`` of a map (world axes).
:func:`reference_glossy`       outgoing radiance of a GGX surface (F = 1) by dense deterministic quadrature.
:func:`reference_glossy_accuracy`  the same at two quadrature resolutions, for the report.
:func:`sh9_project`            exact projection of a map onto the 9 real spherical harmonics of order <= 2.
:func:`sh9_irradiance`         irradiance from those 9 coefficients (an approximation).

The map is a piecewise-constant function
-----------------------------------------
Everything here treats the map the way :meth:`envsample.table.EnvTable.eval` does:
pixel ``(i, j)`` has constant radiance over its cell, ``theta`` in ``[pi i/H, pi (i+1)/H]``
and ``phi`` in ``[2 pi j/W - pi, 2 pi (j+1)/W - pi]`` (plus the map rotation), in the
direction convention of :mod:`envsample.sphere`.  Write ``mu = cos(theta)``; the
solid-angle measure is ``d omega = d mu d phi``.  Internally directions are expressed
in the map's frame ``(x, y, z) = (w.forward_R, w.right_R, w.up)`` with
``forward_R = cos R forward + sin R right`` (R the rotation), so that
``w = (sin theta cos phi, sin theta sin phi, cos theta)`` with the unrotated ``phi``.

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
interval ``|phi - phi_n| < arccos(-n_z mu / (n_h s))`` (``n_h = hypot(n_x, n_y)``).
On a meridian ``phi``, ``n.(w x dl) = (n_y cos phi - n_x sin phi) d theta`` and the
lit part is one interval ``[0, theta_c)`` or ``(theta_c, pi]``.  Both integrals are
read off per-row and per-column prefix sums (cumulative functions that are exact
antiderivatives, piecewise in the cells), so an edge costs O(1) per normal whatever
the map resolution.  The horizon term is a 1D integral of a piecewise-constant
function along a great circle: its crossings with the 2(H-1) latitude circles and
the W half-meridians are computed in closed form, sorted, and each arc between
consecutive crossings lies in one cell.  The cost is O((H + W) log(H + W)) per
normal instead of O(H W): 128x64 normals on a 2048x1024 map take about 14 s on one
core (``benchmarks/bench_reference.py``).  Memory: float64 column sums of the map (24
bytes per cell), latitude tables built in blocks of about 64 MB, and about 150 MB of
temporaries per batch of normals.

Accuracy: the result is the exact integral of the piecewise-constant map up to
floating-point rounding; no quadrature or subdivision is involved.  Coincidences
(the horizon running along the equator or along a meridian edge, as for axis-aligned
normals) are resolved exactly: a horizon arc lying on a cell edge goes to the lit side,
and a normal within :data:`SNAP_RADIANS` (1e-9 rad) of such a direction is first moved
onto it, because at distances of the order of the rounding error the edge tests and the
arc tests could disagree; the move changes E by at most 2e-9 x the integral of L.  The
tests agree with adaptive quadrature (``scipy.integrate``, cell by cell) to 1e-11
relative, and near-degenerate normals to the 1e-9 bound.  The row of each horizon arc
is found by counting latitude crossings from the horizon's highest point (each crossing
moves it up or down one row, a direction known exactly), so a horizon tangent to a
latitude circle is handled exactly as well.
:func:`reference_accuracy` reports a self-consistency residual based on
the exact identity ``E(n) - E(-n) = n . integral of L(w) w dw`` (the right-hand side
from the unclamped closed form), and, if the map was reduced with ``size``, the
change against the full-resolution map.

Glossy reference.  ``L_o(n, wo) = integral of L(w) f(w, wo) max(0, n.w) dw`` with the
GGX reflection of :class:`envsample.strategies.GGXReflection` (Walter et al. 2007
distribution, height-correlated Smith masking-shadowing of Heitz 2014, F = 1); the
integrand is evaluated by that class, so reference and estimators share one BRDF.
Each cell, a rectangle in ``(theta, phi)``, is split adaptively where the lobe is
sharp relative to it and near the horizon of ``n``; the leaves get a 2x2
Gauss-Legendre rule with the ``sin(theta)`` weight (see :func:`reference_glossy`).  It is a quadrature, not a closed form:
:func:`reference_glossy_accuracy` states its resolution error.

SH9.  Ramamoorthi & Hanrahan (2001) approximate irradiance with the 9 spherical
harmonics of order <= 2: ``E(n) = sum_lm A_l L_lm Y_lm(n)`` with ``A_0 = pi``,
``A_1 = 2 pi/3``, ``A_2 = pi/4``.  It is exact only for maps band-limited to order 2;
on real maps the neglected even orders (A_4 = pi/24, ...) cause errors of a few per
cent, and it can go negative opposite a bright source.  It is an approximation,
used in tests and as a cheap cross-check, never as the reference.

These are reference values for asset preparation, not certified lighting calculations.

References
----------
- Arvo, J. (1995). Applications of Irradiance Tensors to the Simulation of
  Non-Lambertian Phenomena. SIGGRAPH 95 (Stokes' theorem on the sphere; Lambert's
  formula for the irradiance of a polygon).
- Ramamoorthi, R. and Hanrahan, P. (2001). An Efficient Representation for
  Irradiance Environment Maps. SIGGRAPH 2001 (equations 3, 8 and 9: the real SH
  basis constants and the clamped-cosine coefficients pi, 2 pi/3, pi/4).
- Walter, B., Marschner, S. R., Li, H. and Torrance, K. E. (2007). Microfacet Models
  for Refraction through Rough Surfaces. EGSR 2007 (the GGX distribution).
- Heitz, E. (2014). Understanding the Masking-Shadowing Function in Microfacet-Based
  BRDFs. JCGT 3(2) (Smith Lambda for GGX, height-correlated G2).
"""

from __future__ import annotations

import math

import numpy as np

from envsample.core.compat import renamed_keywords
from envsample.core.latlong import parse_size, reduce_power
from envsample.core.sphere import UP_AXES, orthonormal_basis, row_solid_angles
from envsample.errors import MapValidationError
from envsample.io.maps import map_pixels
from envsample.sampling.frames import MIN_ROUGHNESS, Frame
from envsample.sampling.ggx import GGXReflection

__all__ = [
    "reference_irradiance",
    "reference_accuracy",
    "cell_cosine_integrals",
    "first_moment",
    "reference_glossy",
    "reference_glossy_accuracy",
    "sh9_project",
    "sh9_irradiance",
    "SH9_BAND_FACTORS",
    "SNAP_RADIANS",
]

TWO_PI = 2.0 * math.pi

#: Clamped-cosine convolution factors A_l of Ramamoorthi & Hanrahan (2001), eq. 8-9, for l = 0, 1, 2.
SH9_BAND_FACTORS = (math.pi, 2.0 * math.pi / 3.0, math.pi / 4.0)

#: Normal length tolerated before renormalisation (larger deviations are an input error).
_UNIT_TOLERANCE = 1e-6

#: Normals closer than this (radians) to a direction whose horizon runs along a cell edge
#: (the up axis, the horizontal plane, a meridian plane of a column edge) are moved onto
#: it, so the coincidence is resolved exactly; E moves by at most twice this x integral of L.
SNAP_RADIANS = 1e-9

#: Work per chunk of normals, in (normals x (2H + W)) elements; bounds temporaries to ~150 MB.
_CHUNK_ELEMENTS = 1_000_000


# ---------------------------------------------------------------------------
# input handling
# ---------------------------------------------------------------------------

def _map_array(rgb, name: str = "rgb") -> np.ndarray:
    """(H, W, 3) float32/float64 radiance from an array or a MapImage (:func:`envsample.io.map_pixels`).

    float32 and float64 maps are kept as they are (not copied): every sum is accumulated
    in float64.  The map must be finite and have at least 2 columns.
    """
    arr = np.ascontiguousarray(map_pixels(rgb, name=name, keep_float64=True))
    if arr.shape[1] < 2:
        raise MapValidationError(f"{name} must have at least 1 row and 2 columns, got shape {arr.shape}")
    bad = ~np.isfinite(arr)
    if bad.any():
        raise MapValidationError(
            f"{name} has {int(bad.any(axis=2).sum())} pixels with NaN or Inf; repair the map first "
            "(envsample.io.validate_map(..., repair=True))"
        )
    return arr


def _prepare_map(rgb, size) -> np.ndarray:
    arr = _map_array(rgb)
    wh = parse_size(size)
    if wh is not None and wh != (arr.shape[1], arr.shape[0]):
        if wh[0] < 2:
            raise ValueError(f"size must have at least 2 columns, got {wh[0]}x{wh[1]}")
        # The table's power-preserving box filter, so reference and table see the same map.
        arr = reduce_power(arr, wh)
    return arr


def _unit_normals(normals, name: str = "normals") -> tuple[np.ndarray, tuple[int, ...]]:
    """Flatten (..., 3) unit vectors to (N, 3) float64; returns them and the leading shape."""
    a = np.asarray(normals, dtype=np.float64)
    if a.ndim == 0 or a.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3), got {a.shape}; pass unit vectors")
    lead = a.shape[:-1]
    a = a.reshape(-1, 3)
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} contains NaN or Inf; pass finite unit vectors")
    norm = np.linalg.norm(a, axis=1)
    if a.shape[0] and np.max(np.abs(norm - 1.0)) > _UNIT_TOLERANCE:
        worst = float(norm[np.argmax(np.abs(norm - 1.0))])
        raise ValueError(f"{name} must be unit vectors (one has length {worst:.6g}); normalise them first")
    return a / norm[:, None], lead


def _cos_sin_deg(deg: float) -> tuple[float, float]:
    """cos and sin of an angle in degrees, exact at multiples of 90 degrees."""
    q, r = divmod(float(deg), 90.0)
    c, s = math.cos(math.radians(r)), math.sin(math.radians(r))
    if r == 0.0:
        c, s = 1.0, 0.0
    for _ in range(int(q) % 4):
        c, s = -s, c
    return c, s


def _map_frame(up: str, rotation_deg: float) -> np.ndarray:
    """Rows forward_R, right_R, up: world -> map-frame coordinates (internal x, y, z)."""
    try:
        f, r, a = (np.array(v, dtype=np.float64) for v in UP_AXES[str(up).lower()])
    except KeyError:
        raise ValueError(f"unknown up axis {up!r}; valid: {', '.join(UP_AXES)}") from None
    c, s = _cos_sin_deg(rotation_deg)
    return np.stack([c * f + s * r, -s * f + c * r, a])


# ---------------------------------------------------------------------------
# the cell grid with exact symmetric trigonometry
# ---------------------------------------------------------------------------

class _Grid:
    """Row and column edges of an H x W map in the map frame.

    ``mu``/``s``: cos and sin of theta at the H+1 row edges, with exact 0 and 1 at the
    equator and exact mirror symmetry, so a horizon on the equator is represented
    exactly.  ``cph``/``sph``: cos and sin of phi at the W+1 column edges, exact at the
    quarter turns.
    """

    def __init__(self, height: int, width: int):
        self.H, self.W = height, width
        k = np.arange(height + 1)
        half = k <= height // 2
        t = np.pi * np.minimum(k, height - k) / height
        mu = np.cos(t)
        s = np.sin(t)
        mu = np.where(half, mu, -mu)
        mu[2 * k == height] = 0.0
        s[2 * k == height] = 1.0
        mu[0], mu[-1], s[0], s[-1] = 1.0, -1.0, 0.0, 0.0
        self.mu, self.s = mu, s
        self.theta = np.pi * k / height
        m = np.arange(width + 1)
        ang = TWO_PI * (m % width) / width
        c, sn = np.cos(ang), np.sin(ang)
        quarter = (4 * (m % width)) % width == 0
        qi = (4 * (m % width)) // width
        c = np.where(quarter, np.array([1.0, 0.0, -1.0, 0.0, 1.0])[np.minimum(qi, 4)], c)
        sn = np.where(quarter, np.array([0.0, 1.0, 0.0, -1.0, 0.0])[np.minimum(qi, 4)], sn)
        if width % 2 == 0:  # exact antipodes: the two halves of one meridian plane
            hw = width // 2
            c[hw:width], sn[hw:width] = -c[:hw], -sn[:hw]
            c[width], sn[width] = c[0], sn[0]
        # phi = -pi + 2 pi m / W, so cos(phi) = -cos(ang), sin(phi) = -sin(ang).
        self.cph, self.sph = -c, -sn
        self.phi = -math.pi + TWO_PI * m / width
        self.dphi = TWO_PI / width


@renamed_keywords(rotate_deg="rotation_deg")
def cell_cosine_integrals(height: int, width: int, normal, *, up: str = "y", rotation_deg: float = 0.0) -> np.ndarray:
    """Unclamped ``int_cell n.w dw`` over every cell of an H x W map, closed form, float64 (H, W).

    ``normal`` is one unit vector (3,) in world space; cells follow :mod:`envsample.sphere`
    (up axis ``up``, rotation ``rotation_deg`` degrees).  The formula is in the module
    docstring; summed over cells it gives 0 (the sphere's first moment), and over the
    cells of the upper hemisphere of ``n = up`` it gives pi.  Units: steradians.
    """
    n, _ = _unit_normals(np.asarray(normal, dtype=np.float64).reshape(1, 3), "normal")
    g = _Grid(int(height), int(width))
    nx, ny, nz = _map_frame(up, rotation_deg) @ n[0]
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
    L = _map_array(rgb)
    g = _Grid(L.shape[0], L.shape[1])
    S1 = 0.5 * (np.diff(g.theta) - np.diff(g.s * g.mu))
    mu2 = -0.5 * np.diff(g.mu * g.mu)
    mx = np.einsum("i,j,ijc->c", S1, np.diff(g.sph), L)
    my = np.einsum("i,j,ijc->c", S1, -np.diff(g.cph), L)
    mz = np.einsum("i,ijc->c", mu2 * g.dphi, L)
    return _map_frame(up, rotation_deg).T @ np.stack([mx, my, mz])


# ---------------------------------------------------------------------------
# exact irradiance
# ---------------------------------------------------------------------------

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
        self.grid = _Grid(H, W)
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


def _latitude_x(g: _Grid, nz, nh, k0: int, k1: int):
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
    sb = np.sqrt(1.0 - xc * xc)
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


def _walk_rows(g: _Grid, t, valid, K, drow, ok, n, e1, e2):
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


def _classify_rows(g: _Grid, wx, wy, wz, nz):
    """Row of points on the horizon; a point exactly on a latitude edge goes to the lit side."""
    H = g.H
    th = np.arctan2(np.hypot(wx, wy), wz)
    r0 = np.clip(np.floor(th * (H / math.pi)).astype(np.int64), 0, H - 1)
    top, bot = g.mu[r0], g.mu[r0 + 1]
    row = r0 - (wz > top) + (wz < bot)
    row = np.where((wz == top) & (r0 > 0) & (nz > 0), r0 - 1, row)
    row = np.where((wz == bot) & (r0 < H - 1) & (nz < 0), r0 + 1, row)
    return np.clip(row, 0, H - 1)


def _classify_cols(g: _Grid, wx, wy, nx, ny):
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


def _chunk_size(chunk, grid_h: int, grid_w: int) -> int:
    if chunk is None:
        return max(1, _CHUNK_ELEMENTS // (2 * grid_h + grid_w + 2))
    chunk = int(chunk)
    if chunk < 1:
        raise ValueError(f"chunk must be a positive number of normals, got {chunk}")
    return chunk


def _snap_normals(g: _Grid, n: np.ndarray) -> np.ndarray:
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


def _irradiance(L: np.ndarray, n_world: np.ndarray, frame: np.ndarray, chunk) -> np.ndarray:
    T = _IrradianceTables(L)
    g = T.grid
    n = _snap_normals(g, n_world @ frame.T)
    nx, ny, nz = n[:, 0], n[:, 1], n[:, 2]
    nh = np.hypot(nx, ny)
    phin = np.arctan2(ny, nx)
    out = np.zeros((n.shape[0], 3), dtype=np.float64)
    step = _chunk_size(chunk, g.H, g.W)
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


@renamed_keywords(rotate_deg="rotation_deg")
def reference_irradiance(rgb, normals, *, up: str = "y", rotation_deg: float = 0.0, size=None,
                         chunk: int | None = None) -> np.ndarray:
    """Exact irradiance ``E(n) = integral of L(w) max(0, n.w) dw`` of a map, float64 ``normals.shape``.

    Parameters
    ----------
    rgb : array_like (H, W, 3) or MapImage
        Linear radiance, taken as constant over each equirectangular cell (the
        convention of :mod:`envsample.sphere`; ``EnvTable.eval`` reads it the same way).
        Any float dtype; computed in float64.  Negative values are integrated as given.
    normals : array_like (..., 3)
        Unit normals, world space (float64; lengths within 1e-6 of 1 are renormalised).
    up : {"y", "z"}
        World up axis of the map.
    rotation_deg : float
        Rotation of the map about the up axis, degrees.
    size : (width, height) or "WxH", optional
        First reduce the map with the table's power-preserving box filter
        (:func:`envsample.table.reduce_power`); the result is then exact for the reduced map.
    chunk : int, optional
        Normals per vectorised batch (default: chosen to keep temporaries near 150 MB).

    Returns
    -------
    ndarray float64, shape ``normals.shape``: irradiance per channel, map units x steradians
    (a uniform map of radiance L gives pi L).

    Notes
    -----
    Exact up to floating-point rounding for the piecewise-constant map (Stokes'
    theorem on the sphere, Arvo 1995; derivation in the module docstring), in
    O((H + W) log(H + W)) operations per normal.  Deterministic.
    """
    L = _prepare_map(rgb, size)
    n, lead = _unit_normals(normals)
    out = _irradiance(L, n, _map_frame(up, rotation_deg), chunk)
    return out.reshape(lead + (3,))


@renamed_keywords(rotate_deg="rotation_deg")
def reference_accuracy(rgb, normals, *, up: str = "y", rotation_deg: float = 0.0, size=None,
                       chunk: int | None = None, max_normals: int = 64) -> dict:
    """Accuracy statement for :func:`reference_irradiance`, JSON-ready.

    Keys
    ----
    ``method``: short description.  ``resolution``: ``[width, height]`` used.
    ``identity_residual``: max over (up to ``max_normals``, evenly chosen) normals of
    ``|E(n) - E(-n) - n . first_moment| / scale`` with ``scale = max(pi * mean |L|, tiny)``;
    the identity is exact, so this measures the rounding of the clipping machinery.
    ``resolution_change``: when ``size`` reduces the map, max ``|E_size - E_full| / scale``
    over the same normals (the error caused by the reduction), else ``None``.
    ``snap_bound``: ``2 * SNAP_RADIANS * integral of |L| dw / scale``, a bound on what moving
    near-degenerate normals onto their degenerate direction can change.
    ``relative_error_bound``: the largest of the three (a conservative statement for the report).
    """
    full = _map_array(rgb)
    L = _prepare_map(full, size)
    n, _ = _unit_normals(normals)
    if n.shape[0] > max_normals:
        n = n[np.linspace(0, n.shape[0] - 1, max_normals).round().astype(np.int64)]
    frame = _map_frame(up, rotation_deg)
    both = _irradiance(L, np.concatenate([n, -n]), frame, chunk)
    e_pos, e_neg = both[: n.shape[0]], both[n.shape[0]:]
    scale = max(math.pi * float(np.mean(np.abs(L))), 1e-300)
    moment = first_moment(L, up=up, rotation_deg=rotation_deg)
    resid = float(np.max(np.abs(e_pos - e_neg - n @ moment))) / scale if n.size else 0.0
    change = None
    if L.shape != full.shape:
        e_full = _irradiance(full, n, frame, chunk)
        change = float(np.max(np.abs(e_pos - e_full))) / scale if n.size else 0.0
    power = float(np.max(np.einsum("i,ijc->c", row_solid_angles(L.shape[0], L.shape[1]), np.abs(L))))
    snap = 2.0 * SNAP_RADIANS * power / scale
    return {
        "method": "exact integral of the piecewise-constant map (boundary form of Stokes' theorem)",
        "resolution": [int(L.shape[1]), int(L.shape[0])],
        "identity_residual": resid,
        "resolution_change": change,
        "snap_bound": snap,
        "relative_error_bound": max(resid, change or 0.0, snap),
    }


# ---------------------------------------------------------------------------
# glossy reference (GGX, F = 1) by adaptive deterministic quadrature
# ---------------------------------------------------------------------------

#: Gauss-Legendre 2-point nodes on [-1, 1] (exact for cubics; Abramowitz & Stegun 25.4.29).
_GL2 = (-1.0 / math.sqrt(3.0), 1.0 / math.sqrt(3.0))

_GGX = GGXReflection()

#: Rectangles evaluated per vectorised batch in the glossy quadrature.
_GLOSSY_BATCH = 200_000


def _pair_vectors(normals, wo, roughness):
    n, lead = _unit_normals(normals)
    w, lead_w = _unit_normals(wo, "wo")
    r = np.asarray(roughness, dtype=np.float64)
    try:
        shape = np.broadcast_shapes(lead, lead_w, r.shape)
    except ValueError:
        raise ValueError(
            f"normals {lead}, wo {lead_w} and roughness {r.shape} do not broadcast; pass matching shapes"
        ) from None
    count = int(np.prod(shape)) if shape else 1
    n = np.broadcast_to(n.reshape(lead + (3,)), shape + (3,)).reshape(count, 3)
    w = np.broadcast_to(w.reshape(lead_w + (3,)), shape + (3,)).reshape(count, 3)
    r = np.broadcast_to(r, shape).reshape(count)
    if not np.all(np.isfinite(r)) or np.any(r < MIN_ROUGHNESS) or np.any(r > 1.0):
        raise ValueError(f"roughness (GGX alpha) must lie in [{MIN_ROUGHNESS}, 1]; got {r.min()}..{r.max()}")
    return n, w, r, shape


def _glossy_kernel(d_world, n, wo, alpha):
    """f(d, wo) max(0, n.d) of the strategies' GGX reflection for one (n, wo, alpha), 1/sr."""
    m = d_world.shape[0]
    frame = Frame(np.broadcast_to(n, (m, 3)), np.broadcast_to(wo, (m, 3)), np.full(m, alpha))
    f = _GGX.eval(d_world, frame)
    return f * np.maximum(d_world @ n, 0.0)


def _glossy_pair(L, g: _Grid, frame, n, wo, alpha, resolution, max_depth, tol):
    """Integral over all cells of L_cell * kernel by adaptive splitting of (theta, phi) rectangles."""
    H, W = g.H, g.W
    nm, wm = frame @ n, frame @ wo  # map-frame copies for the subdivision test
    if wm @ nm <= 0.0:
        return np.zeros(3)
    Lf = L.reshape(H * W, 3)
    ii, jj = np.divmod(np.arange(H * W), W)
    rect = [g.theta[ii], g.theta[ii + 1], g.phi[jj], g.phi[jj + 1], np.arange(H * W)]
    total = np.zeros(3)
    for depth in range(max_depth + 1):
        if rect[0].size == 0:
            break
        t0, t1, p0, p1, cell = rect
        tc, pc = 0.5 * (t0 + t1), 0.5 * (p0 + p1)
        wc = np.stack([np.sin(tc) * np.cos(pc), np.sin(tc) * np.sin(pc), np.cos(tc)], axis=1)
        smax = np.where((t0 < 0.5 * math.pi) & (t1 > 0.5 * math.pi), 1.0, np.maximum(np.sin(t0), np.sin(t1)))
        dt, dp = t1 - t0, smax * (p1 - p0)
        diam = dt + dp  # bounds the angular distance between any two points of the rectangle
        cos_n = wc @ nm
        alive = cos_n > -0.5 * diam  # otherwise every point is below the horizon of n
        h = wc + wm
        h /= np.linalg.norm(h, axis=1)[:, None]
        th = np.arccos(np.clip(h @ nm, -1.0, 1.0))
        # The lobe is resolved geometrically (a sharp peak can hide between quadrature nodes).
        # The integrand has a kink at n's horizon, where the Smith shadowing falls to zero over
        # a band of width ~alpha in cos: rectangles near it are split down to that width while
        # they carry a non-negligible kernel (mean kernel x diameter > tolerance).
        lobe = alive & (diam * resolution > np.maximum(alpha, th)) & (depth < max_depth)
        cand = np.flatnonzero(alive & ~lobe)
        g4 = np.empty(cand.size)
        for a in range(0, cand.size, _GLOSSY_BATCH):
            c = cand[a:a + _GLOSSY_BATCH]
            g4[a:a + _GLOSSY_BATCH] = _rect_integral(frame, n, wo, alpha, t0[c], t1[c], p0[c], p1[c])
        cos_c = np.abs(cos_n[cand])
        dc = diam[cand]
        refine = (cos_c < dc) & (dc * resolution > np.maximum(alpha, cos_c)) \
            & (g4 / ((np.cos(t0[cand]) - np.cos(t1[cand])) * (p1[cand] - p0[cand])) * dc > tol) \
            & (depth < max_depth)
        done = cand[~refine]
        total += np.einsum("r,rc->c", g4[~refine], Lf[cell[done]])
        s = np.sort(np.concatenate([np.flatnonzero(lobe), cand[refine]]))
        rect = _split(t0[s], t1[s], p0[s], p1[s], cell[s], dt[s], dp[s])
    return total


def _split(t0, t1, p0, p1, cell, dt, dp):
    """Halve rectangles along theta, phi or both, whichever sides are long (keeps them compact)."""
    st = dt >= 0.5 * dp
    sp = dp >= 0.5 * dt
    tm, pm = 0.5 * (t0 + t1), 0.5 * (p0 + p1)
    parts = []
    for keep, lo_t, hi_t, lo_p, hi_p in (
        (st & sp, t0, tm, p0, pm), (st & sp, t0, tm, pm, p1), (st & sp, tm, t1, p0, pm), (st & sp, tm, t1, pm, p1),
        (st & ~sp, t0, tm, p0, p1), (st & ~sp, tm, t1, p0, p1),
        (~st & sp, t0, t1, p0, pm), (~st & sp, t0, t1, pm, p1),
    ):
        parts.append((lo_t[keep], hi_t[keep], lo_p[keep], hi_p[keep], cell[keep]))
    return [np.concatenate([p[k] for p in parts]) for k in range(5)]


def _rect_integral(frame, n, wo, alpha, t0, t1, p0, p1):
    """Kernel integrated over each (theta, phi) rectangle, 2x2 Gauss-Legendre with the sin(theta) weight."""
    acc = np.zeros(t0.size)
    for a in _GL2:
        t = 0.5 * (t0 + t1) + 0.5 * (t1 - t0) * a
        st = np.sin(t)
        for b in _GL2:
            ph = 0.5 * (p0 + p1) + 0.5 * (p1 - p0) * b
            d_map = np.stack([st * np.cos(ph), st * np.sin(ph), np.cos(t)], axis=1)
            acc += _glossy_kernel(d_map @ frame, n, wo, alpha) * st
    return 0.25 * (t1 - t0) * (p1 - p0) * acc


@renamed_keywords(rotate_deg="rotation_deg")
def reference_glossy(rgb, normals, wo, roughness, *, up: str = "y", rotation_deg: float = 0.0, size=None,
                     resolution: float = 8.0, tolerance: float = 1e-6, max_depth: int = 16) -> np.ndarray:
    """Outgoing radiance of a GGX reflector (F = 1) lit by the map, by deterministic quadrature.

    ``L_o(n, wo) = integral of L(w) f(w, wo) max(0, n.w) dw`` with ``f`` the GGX reflection of
    :class:`envsample.strategies.GGXReflection`: distribution D of Walter et al. (2007),
    height-correlated Smith G2 of Heitz (2014), Fresnel F = 1 (a lossless white
    reflector, so a uniform white map returns the directional albedo).

    Parameters
    ----------
    rgb : array_like (H, W, 3) or MapImage
        Linear radiance, piecewise constant per cell (see :func:`reference_irradiance`).
    normals, wo : array_like (..., 3)
        Unit normals and unit view directions (pointing away from the surface), world
        space; broadcast together with ``roughness``.  ``wo`` below the surface gives 0.
    roughness : float or array_like
        GGX alpha (the width of D, not a squared "perceptual" roughness), in [1e-4, 1].
    up, rotation_deg, size
        As in :func:`reference_irradiance`.
    resolution : float
        Sub-rectangles per scale length of the integrand.  Each cell, a rectangle in
        ``(theta, phi)``, is halved along its long side(s) while its angular diameter
        exceeds ``scale / resolution``, where ``scale`` is the larger of alpha and the
        half-vector's angle from the peak.  Leaves get a 2x2 Gauss-Legendre rule in
        ``(theta, phi)`` with the ``sin(theta)`` weight (smooth at the poles).  Cells
        entirely below the horizon of ``n`` are skipped.
    tolerance : float
        Near the horizon of ``n`` the Smith shadowing falls to zero over a band of width
        ~alpha (a kink in the integrand): rectangles there are split down to
        ``max(alpha, |n.w|) / resolution`` while their mean kernel (1/sr) times their
        diameter exceeds ``tolerance``.
    max_depth : int
        Maximum number of splits of one cell.

    Returns
    -------
    ndarray float64, shape ``broadcast + (3,)``: radiance in map units.

    Notes
    -----
    A quadrature, not a closed form: :func:`reference_glossy_accuracy` reports the change
    when ``resolution`` is doubled.  At the defaults, the directional albedo of a white map
    matches scipy quadrature to about 1e-8 for views up to 70 degrees and 6e-7 at 83
    degrees, for alpha from 0.01 to 0.5 (tests allow 2e-6).  A Python loop runs over
    (normal, wo) pairs, never over pixels; each pair takes 0.05-1 s on a 64x32 map, so
    it is meant for a few dozen pairs on a reduced map.
    """
    L = _prepare_map(rgb, size)
    n, w, r, shape = _pair_vectors(normals, wo, roughness)
    if not (resolution > 0 and tolerance > 0 and int(max_depth) >= 0):
        raise ValueError(f"resolution and tolerance must be > 0 and max_depth >= 0, got {resolution}, "
                         f"{tolerance} and {max_depth}")
    frame = _map_frame(up, rotation_deg)
    g = _Grid(L.shape[0], L.shape[1])
    out = np.stack([_glossy_pair(L, g, frame, n[p], w[p], float(r[p]), float(resolution), int(max_depth),
                                 float(tolerance))
                    for p in range(n.shape[0])]) if n.shape[0] else np.zeros((0, 3))
    return out.reshape(shape + (3,))


@renamed_keywords(rotate_deg="rotation_deg")
def reference_glossy_accuracy(rgb, normals, wo, roughness, *, up: str = "y", rotation_deg: float = 0.0,
                              size=None, resolution: float = 8.0, tolerance: float = 1e-6,
                              max_depth: int = 16) -> dict:
    """The glossy reference at ``resolution`` and ``2 * resolution``, with the change between them.

    The finer run also uses a tolerance ten times smaller.  Returns a dict: ``values`` (the
    finer result, float64 ``broadcast + (3,)``), ``coarse``, ``change`` (max absolute
    difference over pairs and channels, map units) and ``relative_change`` (that difference
    over the largest finer value): an estimate of the coarser result's quadrature error
    and a conservative one for the finer's.
    """
    kw = dict(up=up, rotation_deg=rotation_deg, size=size, max_depth=max_depth)
    coarse = reference_glossy(rgb, normals, wo, roughness, resolution=resolution, tolerance=tolerance, **kw)
    fine = reference_glossy(rgb, normals, wo, roughness, resolution=2.0 * resolution,
                            tolerance=0.1 * tolerance, **kw)
    change = float(np.max(np.abs(fine - coarse))) if fine.size else 0.0
    top = float(np.max(np.abs(fine))) if fine.size else 0.0
    return {"values": fine, "coarse": coarse, "change": change,
            "relative_change": change / top if top > 0 else 0.0}


# ---------------------------------------------------------------------------
# order-2 spherical harmonics (Ramamoorthi & Hanrahan 2001)
# ---------------------------------------------------------------------------

_Y00 = 0.5 / math.sqrt(math.pi)            # 0.282095
_Y1 = math.sqrt(3.0 / (4.0 * math.pi))     # 0.488603
_Y2 = math.sqrt(15.0 / (4.0 * math.pi))    # 1.092548
_Y20 = math.sqrt(5.0 / (16.0 * math.pi))   # 0.315392
_Y22 = math.sqrt(15.0 / (16.0 * math.pi))  # 0.546274


def _sh9_basis(d: np.ndarray) -> np.ndarray:
    """Real SH Y_lm at unit directions (N, 3) in the order of R&H 2001 eq. 3: (N, 9)."""
    x, y, z = d[:, 0], d[:, 1], d[:, 2]
    return np.stack([
        np.full_like(x, _Y00), _Y1 * y, _Y1 * z, _Y1 * x,
        _Y2 * x * y, _Y2 * y * z, _Y20 * (3.0 * z * z - 1.0), _Y2 * x * z, _Y22 * (x * x - y * y),
    ], axis=1)


@renamed_keywords(rotate_deg="rotation_deg")
def sh9_project(rgb, *, up: str = "y", rotation_deg: float = 0.0, size=None) -> np.ndarray:
    """Coefficients ``L_lm = integral of L(w) Y_lm(w) dw`` for l <= 2, float64 (9, 3).

    Exact for the piecewise-constant map: the moments ``int_cell w_a w_b dw`` have
    closed forms in ``(mu, phi)``.  The basis is the real SH of Ramamoorthi & Hanrahan
    (2001), eq. 3, in **world** coordinates ``(x, y, z)`` (whatever the up axis), in the
    order ``L00, L1-1, L10, L11, L2-2, L2-1, L20, L21, L22``.
    """
    L = _prepare_map(rgb, size)
    g = _Grid(L.shape[0], L.shape[1])
    mu0, mu1, s0, s1 = g.mu[:-1], g.mu[1:], g.s[:-1], g.s[1:]
    dmu = mu0 - mu1
    rows = {
        "1": dmu,
        "s": 0.5 * (np.diff(g.theta) - np.diff(g.s * g.mu)),  # int sqrt(1-mu^2) dmu
        "mu": 0.5 * (mu0 * mu0 - mu1 * mu1),
        "mu2": (mu0 ** 3 - mu1 ** 3) / 3.0,
        "s2": dmu - (mu0 ** 3 - mu1 ** 3) / 3.0,  # int (1 - mu^2) dmu
        "mus": (s1 ** 3 - s0 ** 3) / 3.0,  # int mu sqrt(1-mu^2) dmu
    }
    sin2 = 2.0 * g.sph * g.cph
    cols = {
        "1": np.full(g.W, g.dphi),
        "c": np.diff(g.sph),
        "s": -np.diff(g.cph),
        "cc": 0.5 * g.dphi + 0.25 * np.diff(sin2),
        "ss": 0.5 * g.dphi - 0.25 * np.diff(sin2),
        "cs": 0.5 * np.diff(g.sph * g.sph),
    }
    A = {k: np.einsum("ijc,j->ic", L, v) for k, v in cols.items()}

    def m(r, c):
        return rows[r] @ A[c]

    m0 = m("1", "1")
    m1 = np.stack([m("s", "c"), m("s", "s"), m("mu", "1")])
    m2 = np.empty((3, 3, 3))
    m2[0, 0], m2[1, 1], m2[2, 2] = m("s2", "cc"), m("s2", "ss"), m("mu2", "1")
    m2[0, 1] = m2[1, 0] = m("s2", "cs")
    m2[0, 2] = m2[2, 0] = m("mus", "c")
    m2[1, 2] = m2[2, 1] = m("mus", "s")
    B = _map_frame(up, rotation_deg)  # w_map = B w_world
    w1 = B.T @ m1
    w2 = np.einsum("pa,qb,pqc->abc", B, B, m2)
    return np.stack([
        _Y00 * m0, _Y1 * w1[1], _Y1 * w1[2], _Y1 * w1[0],
        _Y2 * w2[0, 1], _Y2 * w2[1, 2], _Y20 * (3.0 * w2[2, 2] - m0), _Y2 * w2[0, 2], _Y22 * (w2[0, 0] - w2[1, 1]),
    ])


def sh9_irradiance(coeffs, normals) -> np.ndarray:
    """Irradiance from 9 SH coefficients: ``E(n) = sum A_l L_lm Y_lm(n)``, float64 ``normals.shape``.

    Ramamoorthi & Hanrahan (2001), eq. 7-9, with ``A_0 = pi``, ``A_1 = 2 pi/3``,
    ``A_2 = pi/4``.  ``coeffs`` is (9,) or (9, C) from :func:`sh9_project` (world
    coordinates); ``normals`` (..., 3) unit vectors.  Returns ``normals.shape[:-1]``
    (+ ``(C,)``).  **An approximation**: exact only for maps band-limited to order 2;
    errors of a few per cent on real maps, and negative values are possible opposite
    a bright source.
    """
    c = np.asarray(coeffs, dtype=np.float64)
    if c.shape[:1] != (9,) or c.ndim > 2:
        raise ValueError(f"coeffs must have shape (9,) or (9, C), got {c.shape}; use sh9_project()")
    n, lead = _unit_normals(normals)
    a = np.repeat(np.array(SH9_BAND_FACTORS), (1, 3, 5))
    out = (_sh9_basis(n) * a) @ c
    return out.reshape(lead + c.shape[1:])
