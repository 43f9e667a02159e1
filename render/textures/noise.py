"""Periodic noise and pattern primitives: every field here wraps around the image edges.

A texture tiles seamlessly when each field it is built from is periodic with
the image. The primitives guarantee that by construction:

- :func:`periodic_noise` filters white noise in the frequency domain, so the
  result is a sum of sinusoids with a whole number of periods across the
  image (spectral synthesis);
- :func:`worley` scatters one feature point per cell of a whole number of
  cells and measures distances with wrap-around;
- :func:`warp` resamples with wrap-around, so a periodic field displaced by a
  periodic offset stays periodic;
- :func:`band_coverage` draws box-filtered lines, and :func:`row_lattice`
  lays whole numbers of pieces (boards, tiles) per row and rows per image.

Sizes are in metres and pixels as the names say; a square image of
``size_px`` pixels covers ``tile_size_m`` metres, so one pixel is
``tile_size_m / size_px`` metres.

References
----------
- D. S. Ebert, F. K. Musgrave, D. Peachey, K. Perlin, S. Worley, *Texturing
  and Modeling: A Procedural Approach*, 3rd ed., Morgan Kaufmann, 2003
  (spectral synthesis of fractal noise, ch. 16; cellular texture, ch. 4).
- S. Worley, "A cellular texture basis function", SIGGRAPH 1996, 291–294.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage


def smoothstep(edge0: float, edge1: float, x: np.ndarray) -> np.ndarray:
    """Hermite step 3t² − 2t³ of ``x`` between ``edge0`` and ``edge1``, clipped to [0, 1]."""
    t = np.clip((x - edge0) / (edge1 - edge0), 0.0, 1.0)
    return t * t * (3.0 - 2.0 * t)


def pixel_coordinates(size_px: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column coordinates of pixel centres, ``(y_px, x_px)``, each ``(size_px, size_px)`` float32."""
    centres = np.arange(size_px, dtype=np.float32) + 0.5
    return np.meshgrid(centres, centres, indexing="ij")


def periodic_noise(
    rng: np.random.Generator,
    size_px: int,
    tile_size_m: float,
    *,
    largest_m: float,
    smallest_m: float,
    beta: float = 2.0,
    stretch: float = 1.0,
    angle_deg: float = 0.0,
) -> np.ndarray:
    """Band-limited fractal noise that tiles: zero mean, unit standard deviation, float32.

    White noise is filtered in the frequency domain by the amplitude spectrum
    ``|A(f)| = f^(−β/2) · exp(−(f·smallest_m)²) · (1 − exp(−(f·largest_m)²))``,
    f in cycles per metre, so the power spectrum falls as ``f^−β`` between
    the two feature sizes (β = 2 gives Brownian-like clouds, β → 0 white
    grain). With ``stretch`` > 1 features are that many times longer along the
    direction ``angle_deg`` (counter-clockwise from the +column axis, as seen
    on screen with rows going down) than across it.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the white noise (``size_px²`` normal draws).
    size_px : int
        Image side in pixels.
    tile_size_m : float
        Side of the square the image covers, metres.
    largest_m, smallest_m : float
        Feature sizes (metres) at which the spectrum is cut off below and above.
    beta : float
        Spectral exponent of the power spectrum.
    stretch : float
        Anisotropy: feature length along ``angle_deg`` over length across.
    angle_deg : float
        Direction of elongation, degrees.

    Returns
    -------
    numpy.ndarray
        ``(size_px, size_px)`` float32, periodic in both axes.

    References
    ----------
    Ebert et al., *Texturing and Modeling*, 3rd ed. (2003), ch. 16 (spectral synthesis).
    """
    white = rng.standard_normal((size_px, size_px), dtype=np.float32)
    spectrum = np.fft.rfft2(white)
    fy = np.fft.fftfreq(size_px, d=tile_size_m / size_px).astype(np.float32)[:, None]
    fx = np.fft.rfftfreq(size_px, d=tile_size_m / size_px).astype(np.float32)[None, :]
    angle = np.deg2rad(angle_deg)
    # Rows grow downwards on screen, so a counter-clockwise angle has a negative row component.
    along = fx * np.cos(angle) - fy * np.sin(angle)
    across = fx * np.sin(angle) + fy * np.cos(angle)
    f = np.sqrt((along * stretch) ** 2 + across**2)
    f[0, 0] = 1.0
    amplitude = f ** (-beta / 2.0) * np.exp(-((f * smallest_m) ** 2)) * (1.0 - np.exp(-((f * largest_m) ** 2)))
    amplitude[0, 0] = 0.0
    field = np.fft.irfft2(spectrum * amplitude.astype(np.float32), s=(size_px, size_px)).astype(np.float32)
    std = float(field.std())
    return field / std if std > 0 else field


def warp(field: np.ndarray, dy_px: np.ndarray, dx_px: np.ndarray, *, order: int = 1) -> np.ndarray:
    """Resample ``field`` at ``(row + dy_px, column + dx_px)`` with wrap-around (bilinear by default)."""
    size_y, size_x = field.shape
    rows, cols = np.meshgrid(np.arange(size_y, dtype=np.float32), np.arange(size_x, dtype=np.float32), indexing="ij")
    return ndimage.map_coordinates(field, [rows + dy_px, cols + dx_px], order=order, mode="grid-wrap").astype(
        np.float32
    )


def worley(
    rng: np.random.Generator, size_px: int, cells: int, *, jitter: float = 1.0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Periodic cellular noise on a ``cells × cells`` grid of jittered feature points.

    Returns ``(f1, f2, cell_id)``: distance to the nearest and second-nearest
    feature point in cell units (one cell = ``size_px / cells`` pixels) and
    the flat index (row · cells + column) of the nearest point's cell. ``f2 − f1``
    is zero on cell borders and grows towards cell interiors.

    References
    ----------
    S. Worley, "A cellular texture basis function", SIGGRAPH 1996.
    """
    points = 0.5 + jitter * (rng.random((cells, cells, 2), dtype=np.float32) - 0.5)
    y_px, x_px = pixel_coordinates(size_px)
    y = y_px * (cells / size_px)
    x = x_px * (cells / size_px)
    cy = np.floor(y).astype(np.int64)
    cx = np.floor(x).astype(np.int64)
    f1 = np.full(y.shape, np.inf, dtype=np.float32)
    f2 = np.full(y.shape, np.inf, dtype=np.float32)
    ids = np.zeros(y.shape, dtype=np.int64)
    for dj in (-1, 0, 1):
        for di in (-1, 0, 1):
            ny, nx = cy + dj, cx + di
            wy, wx = ny % cells, nx % cells
            py = ny + points[wy, wx, 0]
            px = nx + points[wy, wx, 1]
            d = np.sqrt((py - y) ** 2 + (px - x) ** 2)
            closer = d < f1
            f2 = np.where(closer, f1, np.minimum(f2, d))
            f1 = np.where(closer, d, f1)
            ids = np.where(closer, wy * cells + wx, ids)
    return f1, f2, ids


def band_coverage(distance_px: np.ndarray, width_px: float) -> np.ndarray:
    """Fraction of a unit pixel box covered by a band of ``width_px`` whose centre line is ``distance_px`` away.

    Box-filtered, so bands thinner than a pixel still show with partial
    coverage instead of aliasing.
    """
    d = np.abs(distance_px)
    half = 0.5 * width_px
    return np.clip(np.minimum(d + 0.5, half) - np.maximum(d - 0.5, -half), 0.0, 1.0).astype(np.float32)


def distance_to_lines(position_px: np.ndarray, period_px: float, offset_px: float = 0.0) -> np.ndarray:
    """Unsigned distance (pixels) from ``position_px`` to the nearest of the lines ``offset_px + k · period_px``."""
    return np.abs((position_px - offset_px + 0.5 * period_px) % period_px - 0.5 * period_px).astype(np.float32)


@dataclass(frozen=True)
class RowLattice:
    """Pieces laid in rows along the image's x axis (columns), rows stacked along y.

    Per pixel: ``row`` and ``piece_id`` (row · per_row + index in the row),
    ``along_px`` / ``across_px`` the position inside the piece from its
    start corner, and the distances to the nearest long joint (between rows)
    and butt joint (between pieces of a row).
    """

    row: np.ndarray
    piece_id: np.ndarray
    along_px: np.ndarray
    across_px: np.ndarray
    long_joint_distance_px: np.ndarray
    butt_joint_distance_px: np.ndarray
    rows: int
    per_row: int
    row_pitch_px: float
    piece_pitch_px: float

    @property
    def joint_distance_px(self) -> np.ndarray:
        return np.minimum(self.long_joint_distance_px, self.butt_joint_distance_px)

    def joint_coverage(self, width_px: float) -> np.ndarray:
        """Box-filtered coverage of joints ``width_px`` wide centred on the joint lines."""
        return np.maximum(
            band_coverage(self.long_joint_distance_px, width_px), band_coverage(self.butt_joint_distance_px, width_px)
        )


def row_lattice(size_px: int, rows: int, per_row: int, row_offsets_px: np.ndarray) -> RowLattice:
    """A periodic lattice of ``rows × per_row`` pieces; row r is shifted by ``row_offsets_px[r]`` along x.

    Grid tiling has zero offsets, running bond half a piece on odd rows
    (with an even number of rows), strip flooring random offsets. Both the
    row count and the pieces per row are whole numbers, so the lattice tiles.

    The image origin sits at the centre of piece 0 of row 0, so with zero
    offsets the joints run at ``(k + ½) · pitch`` and the wrap edge crosses
    pieces, not joints. Row r's butt joints are at ``(k + ½) · piece_pitch −
    row_offsets_px[r]``.
    """
    y_px, x_px = pixel_coordinates(size_px)
    row_pitch = size_px / rows
    piece_pitch = size_px / per_row
    y_px = (y_px + 0.5 * row_pitch) % size_px
    row = np.minimum(np.floor(y_px / row_pitch).astype(np.int64), rows - 1)
    across = y_px - row * row_pitch
    shifted = (x_px + 0.5 * piece_pitch + np.asarray(row_offsets_px, dtype=np.float32)[row]) % size_px
    index = np.minimum(np.floor(shifted / piece_pitch).astype(np.int64), per_row - 1)
    along = shifted - index * piece_pitch
    return RowLattice(
        row=row,
        piece_id=row * per_row + index,
        along_px=along.astype(np.float32),
        across_px=across.astype(np.float32),
        long_joint_distance_px=np.minimum(across, row_pitch - across).astype(np.float32),
        butt_joint_distance_px=np.minimum(along, piece_pitch - along).astype(np.float32),
        rows=rows,
        per_row=per_row,
        row_pitch_px=float(row_pitch),
        piece_pitch_px=float(piece_pitch),
    )


def blur(field: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian blur with wrap-around (keeps a periodic field periodic)."""
    if sigma_px <= 0:
        return field
    return ndimage.gaussian_filter(field, sigma_px, mode="wrap").astype(np.float32)


def whole_count(length_m: float, period_m: float, multiple: int = 1) -> int:
    """Number of periods of about ``period_m`` that fit ``length_m`` exactly, rounded to a ``multiple``, ≥ one multiple.

    Patterns with a physical period tile only when a whole number of periods
    spans the image; the period is therefore snapped to ``length_m / count``.
    """
    count = max(1, round(length_m / (period_m * multiple))) * multiple
    return int(count)
