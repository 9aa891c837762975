"""Statistical and quadrature checks of sampling strategies shared by the strategy and GGX tests."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from envsample.core.sphere import to_local, to_world
from envsample.sampling.frames import make_frame

#: Smallest chi-square p-value accepted (fixed seeds; ~3.7 sigma).
P_MIN = 1e-4



#: Samples per chi-square test.
N_CHI = 200_000



HEMI_Z = np.linspace(0.0, 1.0, 17)



SPHERE_Z = np.linspace(-1.0, 1.0, 25)



PHI = np.linspace(0.0, 2.0 * math.pi, 13)



def random_normals(rng, n):
    v = rng.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1)[:, None]



def local_view(theta):
    return np.array([math.sin(theta), 0.0, math.cos(theta)])



def frame_with_view(rng, n, theta_v, alpha):
    """Random world normals with the view at polar angle theta_v in each local frame."""
    normals = random_normals(rng, n)
    wo = to_world(np.broadcast_to(local_view(theta_v), (n, 3)), normals)
    return make_frame(normals, wo, alpha)



def bin_probabilities(strategy, frame_one, z_edges, phi_edges, sub=24):
    """Probability of each (z, phi) bin in the local frame, by dense midpoint quadrature.

    ``frame_one`` has the normal +z so local = world (Duff et al. 2017 basis of +z is
    the identity).  The solid-angle element is dz dphi.
    """
    nz, nphi = len(z_edges) - 1, len(phi_edges) - 1
    zs = (z_edges[:-1, None] + (np.arange(sub) + 0.5)[None, :] / sub * np.diff(z_edges)[:, None]).ravel()
    ps = (phi_edges[:-1, None] + (np.arange(sub) + 0.5)[None, :] / sub * np.diff(phi_edges)[:, None]).ravel()
    z, p = np.meshgrid(zs, ps, indexing="ij")
    s = np.sqrt(np.maximum(0.0, 1.0 - z * z))
    d = np.stack([s * np.cos(p), s * np.sin(p), z], axis=-1).reshape(-1, 3)
    fr = make_frame(np.broadcast_to([0.0, 0.0, 1.0], d.shape),
                    None if frame_one.wo is None else np.broadcast_to(frame_one.wo[0], d.shape),
                    None if frame_one.roughness is None else frame_one.roughness[0])
    dens = strategy.pdf(d, fr).reshape(nz * sub, nphi * sub)
    cell = np.outer(np.repeat(np.diff(z_edges) / sub, sub), np.repeat(np.diff(phi_edges) / sub, sub))
    return (dens * cell).reshape(nz, sub, nphi, sub).sum(axis=(1, 3))



def chi_square(strategy, frame, z_edges, phi_edges, seed):
    """Pearson chi-square of samples (local coordinates) vs the strategy's own pdf (scipy.stats.chisquare)."""
    rng = np.random.default_rng(seed)
    d, pdf = strategy.sample(rng.random((len(frame), 2)), frame)
    local = to_local(d, frame.normals)
    z = np.clip(local[:, 2], -1.0, 1.0)
    phi = np.mod(np.arctan2(local[:, 1], local[:, 0]), 2.0 * math.pi)
    observed, _, _ = np.histogram2d(z, phi, bins=[z_edges, phi_edges])
    one = frame.take(slice(0, 1))
    one = make_frame([0.0, 0.0, 1.0], None if one.wo is None else to_local(one.wo, one.normals),
                     None if one.roughness is None else one.roughness)
    prob = bin_probabilities(strategy, one, z_edges, phi_edges)
    expected = prob.ravel() * len(frame)
    observed = observed.ravel()
    # Pool bins with < 5 expected samples (the usual validity rule of Pearson's test).
    small = expected < 5.0
    obs = np.append(observed[~small], observed[small].sum())
    exp = np.append(expected[~small], expected[small].sum())
    # Mass outside the binned range must be sampled as often as the pdf says.
    exp_out = len(frame) - exp.sum()
    obs_out = len(frame) - obs.sum()
    obs = np.append(obs, obs_out)
    exp = np.append(exp, max(exp_out, 0.0))
    keep = exp > 0
    assert np.all(obs[~keep] == 0), "samples fell where the pdf says there is no mass"
    obs, exp = obs[keep], exp[keep]
    exp *= obs.sum() / exp.sum()  # quadrature rounding only; checked separately to ~1e-4
    return stats.chisquare(obs, exp).pvalue, pdf, d



def cap_integral(f, theta_max, nt=1500, nphi=720):
    """Midpoint quadrature of f(directions (M,3)) over the cap theta in [0, theta_max], all phi,
    with dOmega = sin(theta) dtheta dphi.  Callers end the cap at the integrand's jump so the
    rule sees only smooth pieces."""
    t = (np.arange(nt) + 0.5) * (theta_max / nt)
    p = (np.arange(nphi) + 0.5) * (2.0 * math.pi / nphi)
    tt, pp = np.meshgrid(t, p, indexing="ij")
    d = np.stack([np.sin(tt) * np.cos(pp), np.sin(tt) * np.sin(pp), np.cos(tt)], axis=-1).reshape(-1, 3)
    w = (np.sin(tt) * (theta_max / nt) * (2.0 * math.pi / nphi)).ravel()
    return float(np.dot(f(d), w))
