"""Synthetic radiochromic film scans (numpy + tifffile), for the film demo and
the film tests. INVENTED DATA - NOT FROM ANY REAL FILM, SCANNER OR MACHINE.

A scan's pixel value is PV = PV0 * X(D) per channel, with X(D) = a + b / (D - c)
the scanner-response form of Lewis et al., Med Phys 39:6339 (2012), scaled so
that X(0) = 1, times Gaussian pixel noise and a small per-piece factor (the
non-uniformity of the film). Doses are cGy, lengths cm.

The dose of a measurement film is a square field with an error-function
penumbra and an exponential out-of-field tail (an invented shape, not a
measurement): q(u) = erfc((|u| - F/2) / (sigma sqrt 2)) / 2 + A exp(-d/l1) +
C exp(-d/l2), d = max(|u| - F/2, 0), and D(x, y) = D_axis q(x) q(y) / q(0)^2.
"""
import math

import numpy as np
import tifffile

# Invented responses (X(0) = 1): red darkens fastest, blue least.
RESPONSE = {
    "red": {"pv0": 42000.0, "a": 0.25, "c": -60.0},
    "green": {"pv0": 38000.0, "a": 0.30, "c": -120.0},
    "blue": {"pv0": 30000.0, "a": 0.50, "c": -400.0},
}
CHANNELS = ("red", "green", "blue")


def response(channel, dose):
    """X(D) = a + b / (D - c) with b chosen so that X(0) = 1."""
    r = RESPONSE[channel]
    b = (1.0 - r["a"]) * (-r["c"])
    return r["a"] + b / (np.asarray(dose, dtype=float) - r["c"])


def pixel_values(dose, rng, noise=0.004, piece_factor=None, channels=CHANNELS, thickness=None):
    """16-bit RGB pixel values (H x W x 3) of a dose map (H x W). `thickness` (H x W, 1 for
    the calibration's film) scales every channel's total optical density
    log10(65535 / PV), the unexposed film's own included: PV = 65535 (PV'/65535)^thickness."""
    planes = []
    for ch in channels:
        pv = RESPONSE[ch]["pv0"] * response(ch, dose)
        if thickness is not None:
            pv = 65535.0 * (pv / 65535.0) ** thickness
        if piece_factor is not None:
            pv = pv * piece_factor
        pv = pv * (1.0 + noise * rng.standard_normal(dose.shape))
        planes.append(np.clip(np.rint(pv), 1, 65534).astype(np.uint16))
    return np.stack(planes, axis=-1)


def write_tiff(path, pixels, dpi=None, compression="zlib"):
    """A TIFF as a scanner writes it: RGB (or grey), with or without resolution tags."""
    kw = {}
    if dpi is not None:
        kw["resolution"] = (dpi, dpi)
        kw["resolutionunit"] = "INCH"
    photometric = "rgb" if pixels.ndim == 3 else "minisblack"
    tifffile.imwrite(path, pixels, photometric=photometric, compression=compression, **kw)


def calibration_scan(path, doses, dpi=150, piece_cm=1.2, pitch_cm=1.6, columns=4, seed=1,
                     noise=0.004, uniformity=0.001, noise_seed=None, gain=1.0):
    """One scan holding a grid of calibration pieces on unexposed film. Returns the regions
    [x, y, width, height] in cm (the inner 70 % of each piece) in the order of `doses`.
    Each piece's own factor (the film's non-uniformity, `uniformity`) comes from `seed`, so
    a scan of the same pieces before exposure (doses all 0, another `noise_seed`) has the
    same factors; `gain` scales the whole scan (a scanner's drift between sessions)."""
    rng = np.random.default_rng(seed)
    rows = (len(doses) + columns - 1) // columns
    px = 2.54 / dpi
    W = int(round((columns * pitch_cm + 0.4) / px))
    H = int(round((rows * pitch_cm + 0.4) / px))
    dose = np.zeros((H, W))
    factor = np.ones((H, W))
    regions = []
    for i, d in enumerate(doses):
        r, c = divmod(i, columns)
        x0 = 0.2 + c * pitch_cm + (pitch_cm - piece_cm) / 2
        y0 = 0.2 + r * pitch_cm + (pitch_cm - piece_cm) / 2
        xs = slice(int(round(x0 / px)), int(round((x0 + piece_cm) / px)))
        ys = slice(int(round(y0 / px)), int(round((y0 + piece_cm) / px)))
        dose[ys, xs] = d
        factor[ys, xs] = 1.0 + uniformity * rng.standard_normal()
        m = 0.15 * piece_cm
        regions.append([round(x0 + m, 4), round(y0 + m, 4), round(piece_cm - 2 * m, 4),
                        round(piece_cm - 2 * m, 4)])
    if noise_seed is not None:
        rng = np.random.default_rng(noise_seed)
    write_tiff(path, pixel_values(dose, rng, noise, factor * gain), dpi=dpi)
    return regions


def q_profile(u, field_cm, sigma=0.3, A=0.04, l1=1.0, C=0.008, l2=8.0):
    """The invented one-dimensional shape across a field (relative)."""
    u = np.abs(np.asarray(u, dtype=float))
    d = np.maximum(u - field_cm / 2, 0.0)
    erfc = np.vectorize(math.erfc)
    return 0.5 * erfc((u - field_cm / 2) / (sigma * math.sqrt(2))) + A * np.exp(-d / l1) + \
        C * np.exp(-d / l2)


def field_dose(xx, yy, axis_cgy, field_cm, **shape):
    q0 = q_profile(0.0, field_cm, **shape)
    return axis_cgy * q_profile(xx, field_cm, **shape) * q_profile(yy, field_cm, **shape) / q0 ** 2


def measurement_scan(path, axis_cgy, field_cm, width_cm, height_cm, dpi=100, centre=None,
                     angle_deg=0.0, seed=2, noise=0.004, write_dpi=True, shape=None,
                     control_cm=None, thickness=None, grey=False):
    """A film of one field: the field centre at `centre` (cm from the top left corner;
    default the middle), its crossplane axis along the image's x turned by angle_deg.
    control_cm = [x, y, width, height]: an unexposed control piece lying on the scanner
    beside the film (dose 0 there, thickness 1: a piece of the calibration's sheet).
    thickness(X, Y) -> factor, X and Y cm from the field centre: the film's thickness
    relative to the calibration's (pixel_values). grey: the red channel alone, as one plane."""
    rng = np.random.default_rng(seed)
    px = 2.54 / dpi
    W, H = int(round(width_cm / px)), int(round(height_cm / px))
    cx, cy = centre if centre else (W * px / 2, H * px / 2)
    x = (np.arange(W) + 0.0) * px - cx
    y = (np.arange(H) + 0.0) * px - cy
    X, Y = np.meshgrid(x, y)
    a = math.radians(angle_deg)
    u = X * math.cos(a) + Y * math.sin(a)
    v = -X * math.sin(a) + Y * math.cos(a)
    dose = field_dose(u, v, axis_cgy, field_cm, **(shape or {}))
    tau = None if thickness is None else np.asarray(thickness(X, Y), dtype=float) * np.ones_like(X)
    if control_cm:
        x0, y0, w, h = control_cm
        ys = slice(int(round(y0 / px)), int(round((y0 + h) / px)))
        xs = slice(int(round(x0 / px)), int(round((x0 + w) / px)))
        dose[ys, xs] = 0.0
        if tau is not None:
            tau[ys, xs] = 1.0
    channels = ("red",) if grey else CHANNELS
    pix = pixel_values(dose, rng, noise, channels=channels, thickness=tau)
    write_tiff(path, pix[:, :, 0] if grey else pix, dpi=dpi if write_dpi else None)
    return dose


def truth_percent(x, axis_fraction, field_cm, **shape):
    """The true profile along a field axis, percent of the central-axis maximum."""
    return 100 * axis_fraction * q_profile(x, field_cm, **shape) / q_profile(0.0, field_cm, **shape)


def truth_edge(axis_fraction, field_cm, **shape):
    """Where the true profile is half its value on the axis (bisection)."""
    lo, hi = 0.0, field_cm
    f = lambda u: q_profile(u, field_cm, **shape) / q_profile(0.0, field_cm, **shape) - 0.5
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if f(mid) > 0:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def rational_dose(netod, a, b, c):
    """Dose of a netOD through the rational form, as strayline writes it."""
    return c + b / (10.0 ** (-np.asarray(netod)) - a)


def power_dose(netod, a, b, n):
    x = np.asarray(netod, dtype=float)
    return a * x + b * np.sign(x) * np.abs(x) ** n
