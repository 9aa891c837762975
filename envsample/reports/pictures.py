"""Every picture envsample makes: tone-mapped thumbnails, heat maps, convergence plots, PNG files.

One small module so every report looks alike: a white background, plain
sans-serif labels, perceptually uniform colour maps, and no decoration beyond
what a reader needs.  matplotlib (Agg, no display) is imported inside the
functions that draw, so ``import envsample`` stays cheap.

Public objects
--------------
``srgb_encode``             IEC 61966-2-1 transfer function (linear -> encoded), float.
``log_average_luminance``   Reinhard et al. (2002) eq. 1 over the non-black pixels.
``tonemap``                 HDR linear RGB -> uint8 sRGB, auto or fixed exposure.
``thumbnail``               area-averaged downsampling, then :func:`tonemap`.
``encode_png`` / ``write_png``  PNG bytes / atomic PNG file (temp file + ``os.replace``).
``heatmap_figure``          side-by-side panels sharing one labelled colour bar.
``convergence_plot``        log-log error against samples with an N^-1/2 guide.
``mark_points``             ring markers (e.g. a detected sun) on a uint8 picture.
``colorize``                values -> uint8 RGB through a colour map (what a heat map shows).
``range_overlay``           a grey thumbnail with clipped / over-range / invalid pixels in false colour.
``latlong_figure``          a lat-long picture with azimuth/elevation axes.
``png_size`` / ``png_data_uri``  pixel size of PNG bytes; ``data:image/png;base64,...`` for HTML.

Conventions: input images are linear RGB float ``(H, W, 3)`` (any float dtype),
pictures are uint8 ``(H, W, 3)``; lat-long panels follow :mod:`envsample.sphere`
(left edge azimuth -180 deg, right edge +180 deg, top row elevation +90 deg).

References
----------
- Reinhard, E., Stark, M., Shirley, P. and Ferwerda, J. (2002). Photographic tone
  reproduction for digital images. ACM Transactions on Graphics 21(3), 267-276
  (SIGGRAPH 2002).  Eq. 1 (log-average luminance), eq. 2 (key scaling, key 0.18),
  eq. 3 (the simple global operator L / (1 + L)).
- IEC 61966-2-1:1999. Multimedia systems and equipment - Colour measurement and
  management - Part 2-1: Colour management - Default RGB colour space - sRGB.
- ISO/IEC 15948:2004. Portable Network Graphics (PNG) specification (file signature).
- Smith, N. and van der Walt, S. (2015). A better default colormap for matplotlib.
  SciPy 2015 (the perceptually uniform "magma" and "viridis" maps).
"""

from __future__ import annotations

import base64
import io
import math
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from envsample.core.color import luminance
from envsample.core.files import atomic_write_bytes
from envsample.core.latlong import block_mean

__all__ = [
    "DEFAULT_KEY",
    "TONE_CURVES",
    "srgb_encode",
    "log_average_luminance",
    "tonemap",
    "thumbnail",
    "encode_png",
    "write_png",
    "heatmap_figure",
    "convergence_plot",
    "mark_points",
    "colorize",
    "range_overlay",
    "RANGE_COLORS",
    "latlong_figure",
    "png_size",
    "png_data_uri",
]

#: Key value of an average scene (Reinhard et al. 2002, section 3.1): 0.18.
DEFAULT_KEY = 0.18

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948, section 5.2
_DPI = 110
# Our own series colours and markers for plots (dark enough to read on white).
_SERIES_COLORS = ("#2b5d9c", "#c8552b", "#3f8f4f", "#7d4ea6", "#a88416", "#b23a62", "#4b8b9b", "#5a5a5a")
_SERIES_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h")
_STYLE = {
    "font.family": "sans-serif",
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "axes.edgecolor": "#404040",
    "axes.linewidth": 0.8,
    "axes.facecolor": "white",
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "xtick.color": "#303030",
    "ytick.color": "#303030",
    "legend.frameon": True,
    "legend.edgecolor": "#c0c0c0",
    "legend.fontsize": 8.0,
}


# ---------------------------------------------------------------------------
# tone mapping
# ---------------------------------------------------------------------------

def srgb_encode(linear) -> np.ndarray:
    """sRGB transfer function of IEC 61966-2-1: linear [0, 1] -> encoded [0, 1], float64.

    ``12.92 * L`` for ``L <= 0.0031308``, else ``1.055 * L**(1/2.4) - 0.055``.
    Inputs are clipped to [0, 1] first; NaN becomes 0.
    """
    x = np.nan_to_num(np.asarray(linear, dtype=np.float64), nan=0.0, posinf=1.0, neginf=0.0)
    x = np.clip(x, 0.0, 1.0)
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1.0 / 2.4) - 0.055)


def _clean(rgb) -> np.ndarray:
    arr = np.asarray(rgb)
    if arr.ndim < 1 or arr.shape[-1] != 3:
        raise ValueError(f"image must have shape (..., 3) linear RGB, got {arr.shape}")
    if not np.issubdtype(arr.dtype, np.floating):
        raise ValueError(f"image must be float linear RGB for tone mapping, got dtype {arr.dtype}")
    # Pictures must never fail on bad pixels: NaN shows black, +Inf the brightest value.
    out = np.nan_to_num(arr.astype(np.float32, copy=True), nan=0.0, posinf=np.finfo(np.float32).max, neginf=0.0)
    np.maximum(out, 0.0, out=out)
    return out


def log_average_luminance(rgb, *, delta: float = 1e-6) -> float:
    """Reinhard et al. (2002) eq. 1: ``exp(mean(log(delta + Y)))`` of the BT.709 luminance Y.

    Pixels of zero (or non-finite) luminance are left out: a black ground or a
    masked region would otherwise drive the exposure up without bound (a
    deviation from the paper, which averages every pixel).  Returns 0.0 when no
    pixel has positive luminance.
    """
    y = luminance(_clean(rgb)).astype(np.float64).ravel()
    y = y[np.isfinite(y) & (y > 0)]
    if y.size == 0:
        return 0.0
    return float(np.exp(np.mean(np.log(delta + y))))


def _curve_clip(scaled: np.ndarray, y: np.ndarray) -> np.ndarray:
    return scaled


def _curve_reinhard(scaled: np.ndarray, y: np.ndarray) -> np.ndarray:
    # Eq. 3 on luminance, L_d = L / (1 + L), applied as a per-pixel gain so hue is kept.
    return scaled / (1.0 + y)[..., None]


#: Tone curves after exposure: "clip" (none, values above 1 clip) and "reinhard" (eq. 3).
TONE_CURVES = {"clip": _curve_clip, "reinhard": _curve_reinhard}


def tonemap(rgb, *, exposure: float | None = None, key: float = DEFAULT_KEY, curve: str = "reinhard") -> np.ndarray:
    """Linear HDR RGB ``(..., 3)`` -> uint8 sRGB ``(..., 3)``.

    Parameters
    ----------
    exposure : float or None
        ``None``: scale so the log-average luminance (:func:`log_average_luminance`)
        maps to ``key`` (Reinhard et al. 2002, eq. 2).  A number: a fixed gain of
        ``2**exposure`` (stops), independent of the image.
    key : float
        Target of the auto exposure (default 0.18, the paper's "normal" key).
    curve : {"reinhard", "clip"}
        Compression after exposure (:data:`TONE_CURVES`).

    NaN pixels show black and negative values are clamped to 0; the result is
    then encoded with the sRGB transfer function (IEC 61966-2-1) and rounded.
    """
    fn = TONE_CURVES.get(str(curve).lower())
    if fn is None:
        raise ValueError(f"unknown tone curve {curve!r}; valid: {', '.join(TONE_CURVES)}")
    img = _clean(rgb)
    if exposure is None:
        if not (key > 0 and math.isfinite(key)):
            raise ValueError(f"key must be a positive number, got {key!r}")
        avg = log_average_luminance(img)
        gain = key / avg if avg > 0 else 1.0
    else:
        gain = 2.0 ** float(exposure)
        if not math.isfinite(gain):
            raise ValueError(f"exposure must be a finite number of stops, got {exposure!r}")
    scaled = img.astype(np.float64) * gain
    y = luminance(np.minimum(scaled, np.finfo(np.float32).max).astype(np.float32)).astype(np.float64)
    mapped = fn(scaled, y)
    return np.rint(srgb_encode(mapped) * 255.0).astype(np.uint8)


def thumbnail(rgb, *, width: int = 512, exposure: float | None = None, curve: str = "reinhard") -> np.ndarray:
    """Downsample a linear map by an integer box filter to about ``width`` columns, then tone-map.

    Averaging happens in linear light before tone mapping, so a small bright sun
    still shows in the thumbnail.  Returns uint8 ``(h, w, 3)``.
    """
    arr = np.asarray(rgb)
    if arr.ndim != 3:
        raise ValueError(f"image must have shape (H, W, 3), got {arr.shape}")
    if int(width) != width or width < 1:
        raise ValueError(f"thumbnail width must be a positive integer, got {width!r}")
    f = max(1, arr.shape[1] // int(width))
    if f > 1:
        # A clean map (finite, non-negative: one float64 sum and one minimum, no copy) is averaged as
        # it is; only a map with bad pixels pays for a cleaned full-size copy first.
        with np.errstate(invalid="ignore", over="ignore"):
            clean = np.issubdtype(arr.dtype, np.floating) and bool(np.isfinite(np.sum(arr, dtype=np.float64)))
        clean = clean and float(arr.min()) >= 0.0
        arr = block_mean(arr if clean else _clean(arr), f).astype(np.float32)
    return tonemap(arr, exposure=exposure, curve=curve)


# ---------------------------------------------------------------------------
# PNG files
# ---------------------------------------------------------------------------

def _as_picture(image) -> np.ndarray:
    arr = np.asarray(image)
    if np.issubdtype(arr.dtype, np.floating):
        return tonemap(arr)
    if arr.dtype != np.uint8:
        raise ValueError(f"picture must be uint8 or float linear RGB, got dtype {arr.dtype}")
    if arr.ndim not in (2, 3) or (arr.ndim == 3 and arr.shape[2] not in (1, 3, 4)):
        raise ValueError(f"picture must have shape (H, W), (H, W, 3) or (H, W, 4), got {arr.shape}")
    return np.ascontiguousarray(arr)


def encode_png(image) -> bytes:
    """PNG bytes of a uint8 picture, or of a float linear RGB image after :func:`tonemap`."""
    import imageio.v3 as iio

    return iio.imwrite("<bytes>", _as_picture(image), extension=".png")


def _atomic_write(path, data: bytes) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    return atomic_write_bytes(path, data, fsync=False)


def write_png(path, image) -> Path:
    """Write a PNG atomically (temporary file in the same folder, then ``os.replace``).

    ``image`` is uint8 ``(H, W)``, ``(H, W, 3)`` or ``(H, W, 4)``, or a float linear
    RGB image, which is tone-mapped with :func:`tonemap` defaults.  Returns the path.
    """
    return _atomic_write(path, encode_png(image))


def _save_figure(fig, path) -> Path:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, facecolor="white")
    return _atomic_write(path, buf.getvalue())


def png_size(data: bytes) -> tuple[int, int]:
    """(width, height) of PNG bytes from the IHDR chunk (ISO/IEC 15948, 11.2.2), the first chunk of every PNG."""
    import struct

    if not data.startswith(_PNG_SIGNATURE) or data[12:16] != b"IHDR":
        raise ValueError("not a PNG stream (bad signature or no IHDR chunk)")
    return struct.unpack(">II", data[16:24])


def png_data_uri(path_or_array) -> str:
    """``data:image/png;base64,...`` (RFC 2397) of PNG bytes, a PNG file, or an array encoded by :func:`encode_png`."""
    if isinstance(path_or_array, np.ndarray):
        data = encode_png(path_or_array)
    elif isinstance(path_or_array, (bytes, bytearray)):
        data = bytes(path_or_array)
        png_size(data)
    else:
        p = Path(path_or_array)
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise ValueError(f"{p}: cannot read the picture ({exc.strerror or exc}); check the path") from None
        if not data.startswith(_PNG_SIGNATURE):
            raise ValueError(f"{p}: not a PNG file (bad signature); write it with write_png")
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


# ---------------------------------------------------------------------------
# figures
# ---------------------------------------------------------------------------

def _norm_limits(arrays: list[np.ndarray], vmin, vmax, log: bool) -> tuple[float, float]:
    lows, highs = [], []
    for a in arrays:
        ok = np.isfinite(a) & (a > 0) if log else np.isfinite(a)
        if ok.any():
            lows.append(float(np.min(a, where=ok, initial=np.inf)))
            highs.append(float(np.max(a, where=ok, initial=-np.inf)))
    lo = float(vmin) if vmin is not None else (min(lows) if lows else (1e-3 if log else 0.0))
    hi = float(vmax) if vmax is not None else (max(highs) if highs else 1.0)
    if log and lo <= 0:
        raise ValueError(f"vmin must be > 0 for a log colour scale, got {lo!r}")
    if not hi > lo:
        # A constant panel still needs a range for the colour bar.
        hi = lo * 10.0 if log else lo + max(abs(lo), 1.0) * 1e-3
    return lo, hi


#: Panels wider than this are block-averaged before drawing (a figure shows ~460 columns per panel).
_HEATMAP_MAX_COLUMNS = 1024


def _reduce_panel(arr: np.ndarray, log: bool) -> np.ndarray:
    """Block-average a large panel over its finite (and, for log scales, positive) values; empty blocks stay NaN."""
    f = arr.shape[1] // _HEATMAP_MAX_COLUMNS
    if f < 2:
        return arr
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(arr) & ((arr > 0) if log else True)
    return block_mean(arr, f, valid=ok)


def colorize(values, *, vmin: float, vmax: float, log: bool = False, cmap: str = "magma",
             bad=(212, 212, 212)) -> np.ndarray:
    """2D values -> uint8 RGB ``(H, W, 3)`` through a matplotlib colour map, as :func:`heatmap_figure` shows them.

    Values outside ``[vmin, vmax]`` take the end colours; NaN, infinite (and, with ``log``,
    non-positive) values are drawn in ``bad`` (light grey).
    """
    import matplotlib
    from matplotlib import colors as mcolors

    arr = np.asarray(values, dtype=np.float64)
    norm = mcolors.LogNorm(vmin=vmin, vmax=vmax) if log else mcolors.Normalize(vmin=vmin, vmax=vmax)
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = np.isfinite(arr) & ((arr > 0) if log else True)
        scaled = np.clip(np.ma.filled(norm(np.where(ok, arr, vmin)), 0.0), 0.0, 1.0)
    rgb = matplotlib.colormaps[cmap](scaled)[..., :3]
    out = np.rint(rgb * 255.0).astype(np.uint8)
    out[~ok] = np.asarray(bad, dtype=np.uint8)
    return out


#: Pixels per panel column when rings are drawn on a heat map (rings need some pixels to show).
_RING_PANEL_WIDTH = 512


def ringed_panel(values, rings: Sequence[Mapping], *, vmin: float, vmax: float, log: bool = False,
                 cmap: str = "magma") -> np.ndarray:
    """A heat-map panel as uint8 RGB with rings drawn on it (:func:`mark_points`).

    ``rings`` are mappings with ``uv`` ((N, 2) image coordinates in [0, 1]) and the
    keywords of :func:`mark_points` (``color``, ``radius``, ``thickness``).  The panel is
    enlarged by an integer pixel repetition to about 512 columns first, so a ring keeps
    its size whatever the table's resolution.
    """
    pic = colorize(values, vmin=vmin, vmax=vmax, log=log, cmap=cmap)
    rep = max(1, _RING_PANEL_WIDTH // pic.shape[1])
    if rep > 1:
        pic = np.repeat(np.repeat(pic, rep, axis=0), rep, axis=1)
    for ring in rings:
        style = {k: v for k, v in ring.items() if k != "uv"}
        if len(ring["uv"]):
            pic = mark_points(pic, ring["uv"], **style)
    return pic


#: Margins of a row of heat-map panels, inches: left (tick labels and the y label), below (tick labels and the
#: x label), above a panel (its title), above the row (the figure's title), between panels, and right of the
#: panels (gap, colour bar, its tick labels and label).
_ROW_MARGINS = {"left": 0.75, "below": 0.6, "above": 0.35, "title": 0.35, "gap": 0.6,
                "bar_gap": 0.2, "bar": 0.15, "bar_text": 0.8}


def _panel_row(n: int, panel_w: float, panel_h: float, *, title: bool):
    """A figure of ``n`` axes in a row, each ``panel_w`` x ``panel_h`` inches, and a colour-bar axis at its right.

    The positions are computed once from :data:`_ROW_MARGINS` instead of by a layout
    engine: matplotlib's constrained layout measures every tick label of every panel
    twice, which cost about half of each verify picture.
    """
    from matplotlib.figure import Figure

    m = _ROW_MARGINS
    width = m["left"] + n * panel_w + (n - 1) * m["gap"] + m["bar_gap"] + m["bar"] + m["bar_text"]
    height = m["below"] + panel_h + m["above"] + (m["title"] if title else 0.0)
    fig = Figure(figsize=(width, height))
    axes = [fig.add_axes(((m["left"] + i * (panel_w + m["gap"])) / width, m["below"] / height,
                          panel_w / width, panel_h / height)) for i in range(n)]
    x_bar = m["left"] + n * panel_w + (n - 1) * m["gap"] + m["bar_gap"]
    bar_ax = fig.add_axes((x_bar / width, (m["below"] + 0.05 * panel_h) / height, m["bar"] / width,
                           0.9 * panel_h / height))
    return fig, axes, bar_ax


def heatmap_figure(panels: Sequence, *, path, label: str, vmin: float | None = None, vmax: float | None = None,
                   log: bool = False, cmap: str = "magma", latlong: bool | None = None,
                   rotation_deg: float = 0.0, title: str | None = None, rings: Sequence | None = None) -> Path:
    """Panels side by side sharing one labelled colour bar, saved as PNG; returns the path.

    Parameters
    ----------
    panels : list of (title, 2D array)
        Values to show; NaN/Inf pixels are drawn light grey.
    label : str
        Colour bar label, with units (e.g. "relative error" or "pdf (1/sr)").
    vmin, vmax : float, optional
        Shared colour range; default the finite range over all panels (positive range if ``log``).
    log : bool
        Logarithmic colour scale (non-positive values drawn as "bad").
    cmap : str
        A perceptually uniform matplotlib colour map ("magma" default, "viridis", ...).
    latlong : bool or None
        Label axes in azimuth/elevation degrees; ``None`` decides from a 2:1 shape.
    rotation_deg : float
        Azimuth of the image centre, degrees, for the axis labels of lat-long panels.
    rings : sequence (one entry per panel) of sequences of ring mappings, optional
        Rings drawn on a panel (:func:`ringed_panel`), e.g. around the sun.

    Panels wider than 1024 columns are drawn block-averaged (the figure cannot
    show more), which keeps a 4096-wide panel fast; the colour range is taken
    from the full-resolution values.
    """
    import matplotlib
    from matplotlib import cm, rc_context
    from matplotlib import colors as mcolors

    if not panels:
        raise ValueError("heatmap_figure needs at least one (title, 2D array) panel")
    rings = list(rings) if rings is not None else [()] * len(panels)
    if len(rings) != len(panels):
        raise ValueError(f"rings has {len(rings)} entries for {len(panels)} panels; give one (possibly empty) per panel")
    items = []
    for k, panel in enumerate(panels):
        try:
            name, data = panel
        except (TypeError, ValueError):
            raise ValueError(f"panels[{k}] must be a (title, 2D array) pair") from None
        arr = np.asarray(data, dtype=np.float64)
        if arr.ndim != 2 or arr.size == 0:
            raise ValueError(f"panels[{k}] ({name}) must be a non-empty 2D array, got shape {arr.shape}")
        items.append((str(name), arr))
    lo, hi = _norm_limits([a for _, a in items], vmin, vmax, log)
    norm = mcolors.LogNorm(vmin=lo, vmax=hi) if log else mcolors.Normalize(vmin=lo, vmax=hi)
    colormap = matplotlib.colormaps[cmap].with_extremes(bad="#d4d4d4")

    n = len(items)
    aspect = max(a.shape[1] / a.shape[0] for _, a in items)
    panel_w = 4.2 if aspect >= 1.5 else 3.0
    with rc_context(_STYLE):
        fig, axes, bar_ax = _panel_row(n, panel_w, max(1.6, panel_w / aspect), title=bool(title))
        for i, (ax, (name, arr)) in enumerate(zip(axes, items)):
            is_ll = latlong if latlong is not None else arr.shape[1] == 2 * arr.shape[0]
            small = _reduce_panel(arr, log)
            shown = np.where(np.isfinite(small) & ((small > 0) if log else True), small, np.nan)
            if rings[i]:
                shown = ringed_panel(small, rings[i], vmin=lo, vmax=hi, log=log, cmap=cmap)
            # An RGB panel (with rings) is drawn as it is; values go through the norm and colour map.
            kw = {} if shown.ndim == 3 else {"cmap": colormap, "norm": norm}
            if is_ll:
                extent = (-180.0 + rotation_deg, 180.0 + rotation_deg, -90.0, 90.0)
                ax.imshow(shown, extent=extent, origin="upper", interpolation="nearest", aspect="equal", **kw)
                ax.set_xticks(np.arange(-180.0, 181.0, 90.0) + rotation_deg)
                ax.set_yticks(np.arange(-90.0, 91.0, 45.0))
                ax.set_xlabel("azimuth (deg)")
                if i == 0:
                    ax.set_ylabel("elevation (deg)")
            else:
                ax.imshow(shown, interpolation="nearest", aspect="equal", **kw)
                ax.set_xlabel("column")
                if i == 0:
                    ax.set_ylabel("row")
            ax.set_title(name)
        bar = fig.colorbar(cm.ScalarMappable(norm=norm, cmap=colormap), cax=bar_ax)
        bar.set_label(label)
        if title:
            fig.suptitle(title)
        return _save_figure(fig, path)


def convergence_plot(spp_values, series: Mapping[str, Sequence[float]], *, path, title: str | None = None,
                     xlabel: str = "samples per pixel", ylabel: str = "relative RMSE",
                     reference: bool = True, bands: Mapping | None = None, marks: Mapping | None = None,
                     xscale: str = "log", note: str | None = None) -> Path:
    """Plot of error against sample count (log-log), one marked line per series; returns the path.

    ``series`` maps a name to errors at each of ``spp_values`` (same length);
    non-positive or non-finite errors are left out of the plot (e.g. an exact
    zero).  With ``reference`` a dashed ``N^-1/2`` line (the Monte Carlo rate of
    an unbiased estimator with finite variance, textbook) passes through the
    first plotted point of the first series.  ``bands`` maps a series name to its
    standard error at each count (shaded as error +- one standard error, so a lucky
    run shows); ``marks`` maps a name to one ``(count, error)`` point drawn as a large
    star in the series' colour (e.g. the figure of the table beside the plot).
    ``xscale="linear"`` draws a linear x axis (no guide line); ``note`` is printed
    under the axes.
    """
    import matplotlib.ticker
    from matplotlib import rc_context
    from matplotlib.figure import Figure

    x = np.asarray(spp_values, dtype=np.float64).ravel()
    if x.size == 0 or not np.all(np.isfinite(x) & ((x > 0) if xscale == "log" else True)):
        raise ValueError("spp_values must be a non-empty list of positive sample counts")
    if not series:
        raise ValueError("convergence_plot needs at least one series")
    data = {}
    for name, ys in series.items():
        y = np.asarray(ys, dtype=np.float64).ravel()
        if y.shape != x.shape:
            raise ValueError(f"series {name!r} has {y.size} values for {x.size} spp_values; give one error per count")
        data[str(name)] = np.where(np.isfinite(y) & (y > 0), y, np.nan)
    bands, marks = dict(bands or {}), dict(marks or {})

    with rc_context(_STYLE):
        fig = Figure(figsize=(5.6, 4.3 if note else 4.0), layout="constrained")
        ax = fig.subplots()
        anchor = None
        for k, (name, y) in enumerate(data.items()):
            ok = np.isfinite(y)
            color = _SERIES_COLORS[k % len(_SERIES_COLORS)]
            ax.plot(x[ok], y[ok], marker=_SERIES_MARKERS[k % len(_SERIES_MARKERS)],
                    color=color, linewidth=1.4, markersize=5, label=name)
            if name in bands:
                se = np.asarray([np.nan if v is None else v for v in bands[name]], dtype=np.float64)
                lo = np.where(np.isfinite(se), np.maximum(y - se, y * 0.05), np.nan)
                hi = np.where(np.isfinite(se), y + se, np.nan)
                good = ok & np.isfinite(lo) & np.isfinite(hi)
                if good.any():
                    ax.fill_between(x[good], lo[good], hi[good], color=color, alpha=0.15, linewidth=0)
            if name in marks and marks[name] is not None:
                mx, my = marks[name]
                if my is not None and math.isfinite(my) and my > 0:
                    ax.plot([mx], [my], marker="*", markersize=13, color=color, markeredgecolor="black",
                            markeredgewidth=0.6, linestyle="none")
            if anchor is None and ok.any():
                i0 = int(np.flatnonzero(ok)[0])
                anchor = (x[i0], y[i0])
        if reference and anchor is not None and xscale == "log":
            xs = np.array([x.min(), x.max()])
            ax.plot(xs, anchor[1] * np.sqrt(anchor[0] / xs), linestyle="--", color="#808080",
                    linewidth=1.0, label=r"$N^{-1/2}$ reference")
        ax.set_xscale(xscale)
        ax.set_yscale("log")
        # Ticks at the counts drawn, written as plain numbers.
        ax.set_xticks(x, [f"{v:g}" for v in x])
        ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.grid(True, which="major", color="#e2e2e2", linewidth=0.7)
        ax.grid(True, which="minor", color="#f0f0f0", linewidth=0.5)
        ax.legend(loc="best")
        if title:
            ax.set_title(title)
        if note:
            # A figure-level label below the axes: the constrained layout makes room for it.
            fig.supxlabel(note, fontsize=7.0, color="#404040", wrap=True)
        return _save_figure(fig, path)


def latlong_figure(picture, *, path, rotation_deg: float = 0.0, title: str | None = None) -> Path:
    """A lat-long picture (uint8 ``(H, W, 3)``, row 0 at the zenith) with azimuth/elevation axes in degrees.

    Axes follow :mod:`envsample.core.sphere`: the left edge is azimuth -180 deg +
    ``rotation_deg``, the right edge +180 deg + ``rotation_deg``, the top row elevation +90 deg.
    """
    from matplotlib import rc_context
    from matplotlib.figure import Figure

    pic = _as_picture(picture)
    h, w = pic.shape[:2]
    with rc_context(_STYLE):
        # Fixed margins (inches) instead of a layout engine, as in _panel_row: the box holds the picture's shape.
        box_w = min(10.0, max(5.0, w / _DPI))
        box_h = box_w * h / w
        m = _ROW_MARGINS
        width, height = m["left"] + box_w + 0.35, m["below"] + box_h + m["above"]
        fig = Figure(figsize=(width, height))
        ax = fig.add_axes((m["left"] / width, m["below"] / height, box_w / width, box_h / height))
        ax.imshow(pic, extent=(-180.0 + rotation_deg, 180.0 + rotation_deg, -90.0, 90.0), origin="upper",
                  interpolation="nearest", aspect="equal")
        ax.set_xticks(np.arange(-180.0, 181.0, 45.0) + rotation_deg)
        ax.set_yticks(np.arange(-90.0, 91.0, 30.0))
        ax.set_xlabel("azimuth (deg)")
        ax.set_ylabel("elevation (deg)")
        if title:
            ax.set_title(title)
        return _save_figure(fig, path)


def image_panels(panels: Sequence, *, path, title: str | None = None) -> Path:
    """Pictures side by side, each with its title above it (no axes); returns the path.

    ``panels`` is a list of ``(title, uint8 image (H, W, 3))``.  Used for renders a
    person compares by eye (reference beside estimate) so each is named on the page.
    """
    from matplotlib import rc_context
    from matplotlib.figure import Figure

    if not panels:
        raise ValueError("image_panels needs at least one (title, image) pair")
    h = max(int(np.asarray(img).shape[0]) for _, img in panels)
    w = sum(int(np.asarray(img).shape[1]) for _, img in panels)
    # A title of several lines (split at "\n" by the caller, so none is wider than the pictures) gets room per line.
    title_room = 0.25 * (title.count("\n") + 1) + 0.05 if title else 0.0
    with rc_context(_STYLE):
        fig = Figure(figsize=(max(3.0, w / _DPI * 1.1), h / _DPI + 0.6 + title_room), layout="constrained")
        axes = fig.subplots(1, len(panels), squeeze=False)[0]
        for ax, (name, img) in zip(axes, panels):
            ax.imshow(_as_picture(img), interpolation="nearest")
            ax.set_title(str(name))
            ax.set_axis_off()
        if title:
            fig.suptitle(title)
        return _save_figure(fig, path)


# ---------------------------------------------------------------------------
# markers
# ---------------------------------------------------------------------------

def mark_points(image, uv_points, *, color=(0, 210, 255), radius: float = 6.0, thickness: float = 2.0,
                outline=(0, 0, 0), wrap: bool = True) -> np.ndarray:
    """Draw a ring around each ``(u, v)`` point (image coordinates in [0, 1]) on a copy of a uint8 picture.

    ``u`` maps to column ``u * W`` and ``v`` to row ``v * H`` (pixel centres at
    half-integers, the convention of :mod:`envsample.sphere`).  The ring has
    radius ``radius`` and width ``thickness`` pixels, with a one-pixel
    ``outline`` on both sides (``None`` for none) so it shows on bright and dark
    skies alike.  ``wrap`` lets rings cross the left/right seam of a lat-long picture.
    """
    img = np.asarray(image)
    if img.dtype != np.uint8 or img.ndim != 3 or img.shape[2] != 3:
        raise ValueError(f"mark_points needs a uint8 (H, W, 3) picture, got {img.dtype} {img.shape}; use tonemap first")
    pts = np.asarray(uv_points, dtype=np.float64).reshape(-1, 2)
    if not np.all(np.isfinite(pts)):
        raise ValueError("uv_points must be finite (u, v) pairs")
    if not (radius > 0 and thickness > 0):
        raise ValueError(f"radius and thickness must be positive, got {radius!r}, {thickness!r}")
    out = img.copy()
    h, w = img.shape[:2]
    ring_rgb = np.asarray(color, dtype=np.uint8)
    line_rgb = None if outline is None else np.asarray(outline, dtype=np.uint8)
    reach = radius + thickness / 2.0 + 1.5
    for u, v in pts:
        cx, cy = u * w, v * h
        rows = np.arange(max(0, int(cy - reach)), min(h, int(cy + reach) + 2))
        if wrap:
            cols = np.arange(int(cx - reach), int(cx + reach) + 2) % w
            cols = np.unique(cols)
            dx = (cols + 0.5 - cx + w / 2.0) % w - w / 2.0
        else:
            cols = np.arange(max(0, int(cx - reach)), min(w, int(cx + reach) + 2))
            dx = cols + 0.5 - cx
        if rows.size == 0 or cols.size == 0:
            continue
        dy = rows + 0.5 - cy
        off = np.abs(np.hypot(dy[:, None], dx[None, :]) - radius)
        block = out[np.ix_(rows, cols)]
        if line_rgb is not None:
            block[(off > thickness / 2.0) & (off <= thickness / 2.0 + 1.0)] = line_rgb
        block[off <= thickness / 2.0] = ring_rgb
        out[np.ix_(rows, cols)] = block
    return out


# ---------------------------------------------------------------------------
# range overlay
# ---------------------------------------------------------------------------

#: False colours of :func:`range_overlay` (our choice; far from any grey), by pixel class.
RANGE_COLORS = {"clipped": (255, 140, 0), "over range": (0, 110, 255), "invalid": (190, 0, 255)}


def range_overlay(rgb, *, clip_level: float | None = None, clip_tolerance: float = 0.0,
                  over_level: float, width: int = 512) -> tuple[np.ndarray, dict]:
    """A grey thumbnail with problem pixels in false colour, and the pixel counts per class.

    Classes (:data:`RANGE_COLORS`), checked on the largest channel of each map pixel:
    ``invalid`` (NaN or negative), ``over range`` (``+Inf`` or above ``over_level``, e.g.
    the half-float maximum), ``clipped`` (within ``clip_tolerance`` (relative) of
    ``clip_level``, the level a clipping check found: one number for the largest channel, or
    one per channel (R, G, B; None for a channel that is not clipped); ``None``: none).  The thumbnail
    is the tone-mapped map in grey, downsampled like :func:`thumbnail`; a thumbnail
    pixel takes the colour of the worst class among the map pixels it covers
    (invalid > over range > clipped), so a single bad pixel still shows.  Maps
    narrower than ``width`` are enlarged by an integer pixel repetition.
    """
    arr = np.asarray(rgb)
    if arr.ndim != 3 or arr.shape[2] != 3:
        raise ValueError(f"image must have shape (H, W, 3), got {arr.shape}")
    with np.errstate(invalid="ignore"):
        top = np.max(arr, axis=2).astype(np.float64)
        invalid = np.isnan(arr).any(axis=2) | (np.nan_to_num(arr, nan=0.0) < 0).any(axis=2)
        over = ~invalid & (top > over_level)
        clipped = np.zeros_like(over)
        if clip_level is not None and np.ndim(clip_level) == 0:
            if clip_level > 0:
                clipped = ~invalid & ~over & (top >= clip_level * (1.0 - clip_tolerance))
        elif clip_level is not None:
            for c, level in enumerate(clip_level):
                if level is not None and level > 0:
                    clipped |= arr[..., c] >= level * (1.0 - clip_tolerance)
            clipped &= ~invalid & ~over
    counts = {"clipped": int(clipped.sum()), "over range": int(over.sum()), "invalid": int(invalid.sum())}
    grey = thumbnail(np.asarray(arr, dtype=np.float32), width=width)
    f = max(1, arr.shape[1] // int(width))
    pic = np.repeat(np.rint(grey.mean(axis=2, keepdims=True)).astype(np.uint8), 3, axis=2)
    for name in ("clipped", "over range", "invalid"):
        mask = {"clipped": clipped, "over range": over, "invalid": invalid}[name]
        if f > 1:
            mask = block_mean(mask.astype(np.float32), f) > 0
        pic[mask[:pic.shape[0], :pic.shape[1]]] = RANGE_COLORS[name]
    rep = max(1, int(width) // pic.shape[1])
    if rep > 1:
        pic = np.repeat(np.repeat(pic, rep, axis=0), rep, axis=1)
    return pic, counts
