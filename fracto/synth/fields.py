"""Seeded random height fields made by spectral synthesis.

Two families that have analytic statistics, used as checks for the surface
metrology and as building blocks for synthetic fracture surfaces:

* `gaussian_correlated_field`: a Gaussian random field whose autocorrelation
  function is ``exp(-(r/tau)^2)`` (optionally anisotropic and rotated);
* `self_affine_field`: a fractional-Brownian-like surface with isotropic power
  spectral density ``C(q) ∝ q^(-2(1+H))`` (Voss 1988), optionally with a
  roll-off and a long-wavelength cutoff.

Both return float64 arrays in micrometres, rows = y, columns = x, with mean 0
and a sample RMS height equal to ``rms_um``. The fields are periodic over the
map (a property of synthesis on the FFT grid).

References
----------
.. [1] R. F. Voss, "Fractals in nature: from characterization to simulation",
   in H.-O. Peitgen and D. Saupe (eds.), *The Science of Fractal Images*,
   Springer, 1988, pp. 21-70.
.. [2] B. N. J. Persson, O. Albohr, U. Tartaglino, A. I. Volokitin and
   E. Tosatti, "On the nature of surface roughness with application to contact
   mechanics, sealing, rubber friction and adhesion", *J. Phys.: Condens.
   Matter* 17 (2005) R1-R62 (roll-off of the PSD, wavenumber q = 2π/λ;
   details from memory).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.fft as sfft

from fracto.errors import FractoInputError

__all__ = ["gaussian_correlated_field", "self_affine_field"]


def _check_grid(shape: tuple[int, int], dx: float, dy: float, rms_um: float) -> tuple[int, int]:
    try:
        ny, nx = (int(s) for s in shape)
    except (TypeError, ValueError):
        raise FractoInputError("The field shape must be two integers (rows, columns).") from None
    if ny < 2 or nx < 2:
        raise FractoInputError("The field must have at least 2 rows and 2 columns.")
    for name, v in (("dx", dx), ("dy", dy)):
        if not (math.isfinite(v) and v > 0):
            raise FractoInputError(
                f"The sampling interval {name} must be a positive length in µm."
            )
    if not (math.isfinite(rms_um) and rms_um >= 0):
        raise FractoInputError("The RMS height must be a non-negative length in µm.")
    return ny, nx


def _frequency_grid(ny: int, nx: int, dx: float, dy: float) -> tuple[np.ndarray, np.ndarray]:
    """Spatial frequencies (cycles/µm) of the rfft2 half-plane, broadcastable."""
    fy = sfft.fftfreq(ny, d=dy)[:, None]
    fx = sfft.rfftfreq(nx, d=dx)[None, :]
    return fy, fx


def _to_rms(spectrum: np.ndarray, shape: tuple[int, int], rms_um: float) -> np.ndarray:
    """Inverse transform, remove the mean and scale to the requested sample RMS."""
    z = sfft.irfft2(spectrum, s=shape)
    z -= z.mean()
    s = float(np.sqrt(np.mean(z * z)))
    if s > 0:
        z *= rms_um / s
    return z


def gaussian_correlated_field(
    shape: tuple[int, int],
    correlation_length_um: float,
    dx: float,
    dy: float,
    *,
    rms_um: float = 1.0,
    seed: int = 0,
    anisotropy: float = 1.0,
    angle_deg: float = 0.0,
) -> np.ndarray:
    """Gaussian random field with a Gaussian autocorrelation function.

    The autocorrelation function (ACF) is

    .. math:: R(u, v) = \\sigma^2 \\exp(-(u/\\tau_x)^2 - (v/\\tau_y)^2),

    with ``tau_x = correlation_length_um``, ``tau_y = tau_x * anisotropy`` and
    (u, v) the (x, y) coordinates rotated by ``angle_deg`` (counter-clockwise
    from +x towards +y, y being the row index direction).

    Derivation of the power spectral density used (Wiener–Khinchin: the PSD is
    the Fourier transform of the ACF). With the convention
    ``F(f) = ∫ g(x) exp(-2πi f x) dx``, ``∫ exp(-(x/τ)²) exp(-2πi f x) dx =
    τ √π exp(-π² τ² f²)``; the 2-D ACF is separable in (u, v) and a rotation of
    coordinates rotates the transform the same way, so

    .. math:: S(f_u, f_v) = \\sigma^2 \\pi \\tau_x \\tau_y
              \\exp(-\\pi^2 (\\tau_x^2 f_u^2 + \\tau_y^2 f_v^2)),

    ``f_u = f_x cos α + f_y sin α``, ``f_v = -f_x sin α + f_y cos α``.
    White Gaussian noise is transformed, multiplied by ``sqrt(S)`` and
    transformed back (filtered white noise), which gives a Gaussian field with
    that ACF (periodic over the map). The result is then shifted to mean 0 and
    scaled to a sample RMS of exactly ``rms_um``.

    The sampled spectrum is band-limited at the Nyquist frequency; the loss is
    ``exp(-π² τ² / (4 Δ²))`` of the spectral density at Nyquist (5e-5 for
    τ = 2Δ), so keep the correlation lengths at two pixels or more. The map
    should be several correlation lengths across, or the sample ACF is biased
    by the periodic wrap and the mean removal.

    Parameters
    ----------
    shape : (int, int)
        (rows, columns) of the output.
    correlation_length_um : float
        τ (µm) along the rotated u axis; the ACF falls to 1/e at r = τ.
    dx, dy : float
        Column and row spacing (µm).
    rms_um : float
        Sample RMS height of the output (µm).
    seed : int
        Seed of the numpy random Generator.
    anisotropy : float
        τ_y / τ_x (1 = isotropic).
    angle_deg : float
        Rotation of the (u, v) axes from (x, y), degrees.

    Returns
    -------
    ndarray of float64, shape ``shape``, µm.

    References
    ----------
    .. [1] R. F. Voss, in *The Science of Fractal Images*, Springer, 1988
       (spectral synthesis by filtering white noise).
    .. [2] ISO 25178-2:2012, clause 3 (autocorrelation function, Sal, Str),
       for which the Gaussian ACF gives Sal(s = 0.2) = τ √ln 5.
    """
    ny, nx = _check_grid(shape, dx, dy, rms_um)
    tau_x = float(correlation_length_um)
    if not (math.isfinite(tau_x) and tau_x > 0):
        raise FractoInputError("The correlation length must be a positive length in µm.")
    if not (math.isfinite(anisotropy) and anisotropy > 0):
        raise FractoInputError("The anisotropy (τ_y/τ_x) must be a positive number.")
    if not math.isfinite(angle_deg):
        raise FractoInputError("The angle must be a finite number of degrees.")
    tau_y = tau_x * float(anisotropy)
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((ny, nx))
    fy, fx = _frequency_grid(ny, nx, dx, dy)
    a = math.radians(angle_deg)
    fu = fx * math.cos(a) + fy * math.sin(a)
    fv = -fx * math.sin(a) + fy * math.cos(a)
    # sqrt of S(f) up to a constant factor (the RMS is set afterwards).
    amplitude = np.exp(-0.5 * math.pi**2 * ((tau_x * fu) ** 2 + (tau_y * fv) ** 2))
    spectrum = sfft.rfft2(noise) * amplitude
    spectrum[0, 0] = 0.0
    return _to_rms(spectrum, (ny, nx), float(rms_um))


def self_affine_field(
    shape: tuple[int, int],
    hurst: float,
    dx: float,
    dy: float,
    *,
    rms_um: float = 1.0,
    seed: int = 0,
    q_low_cutoff: float | None = None,
    q_roll_off: float | None = None,
) -> np.ndarray:
    """Self-affine (fractional-Brownian-like) surface by spectral synthesis.

    The isotropic areal power spectral density is

    .. math:: C(q) ∝ q^{-2(1+H)},

    so the surface has Hurst exponent H and fractal dimension D = 3 − H, its
    profiles have PSD ∝ q^(−(1+2H)) and its structure function grows as
    r^(2H) (Voss 1988). The Fourier amplitudes are set to ``sqrt(C(q))`` with
    random phases: the phases are those of the rfft2 of seeded white noise,
    which are uniform and already Hermitian-consistent, so the inverse real
    transform (irfft2) gives a real surface. The amplitudes are deterministic
    (not Rayleigh-distributed), which keeps the sample PSD on the power law
    with little scatter. The output has mean 0 and sample RMS ``rms_um``.

    Wavenumbers are q = 2π·f (rad/µm, f in cycles/µm), |q| from the physical
    spacings, so non-square pixels keep the PSD isotropic in µm.

    Optional shaping of the spectrum (Persson et al. 2005):

    * ``q_roll_off``: below it C(q) is flat at C(q_roll_off) (the roll-off
      region; the surface looks flat beyond wavelengths 2π/q_roll_off);
    * ``q_low_cutoff``: below it C(q) = 0 (no longer wavelengths at all).

    Parameters
    ----------
    shape : (int, int)
        (rows, columns).
    hurst : float
        Hurst exponent H, 0 < H ≤ 1.
    dx, dy : float
        Column and row spacing (µm).
    rms_um : float
        Sample RMS height (µm).
    seed : int
        Seed of the numpy random Generator.
    q_low_cutoff, q_roll_off : float or None
        Wavenumbers (rad/µm) of the cutoff and the roll-off, or None.

    Returns
    -------
    ndarray of float64, shape ``shape``, µm.

    References
    ----------
    .. [1] R. F. Voss, "Fractals in nature: from characterization to
       simulation", in *The Science of Fractal Images*, Springer, 1988.
    .. [2] B. B. Mandelbrot, D. E. Passoja and A. J. Paullay, "Fractal
       character of fracture surfaces of metals", *Nature* 308 (1984) 721-722.
    .. [3] B. N. J. Persson et al., *J. Phys.: Condens. Matter* 17 (2005) R1.
    """
    ny, nx = _check_grid(shape, dx, dy, rms_um)
    h = float(hurst)
    if not (math.isfinite(h) and 0.0 < h <= 1.0):
        raise FractoInputError("The Hurst exponent must lie in (0, 1].")
    for name, v in (("q_low_cutoff", q_low_cutoff), ("q_roll_off", q_roll_off)):
        if v is not None and not (math.isfinite(v) and v > 0):
            raise FractoInputError(f"{name} must be a positive wavenumber in rad/µm.")
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((ny, nx))
    spectrum = sfft.rfft2(noise)
    mag = np.abs(spectrum)
    mag[mag == 0] = 1.0
    spectrum /= mag  # unit amplitude, random phase
    fy, fx = _frequency_grid(ny, nx, dx, dy)
    q = 2.0 * math.pi * np.sqrt(fx * fx + fy * fy)
    q[0, 0] = np.inf  # DC gets zero amplitude
    q_eff = q if q_roll_off is None else np.maximum(q, q_roll_off)
    amplitude = q_eff ** (-(1.0 + h))  # sqrt of C(q) ∝ q^(-2(1+H))
    if q_low_cutoff is not None:
        amplitude[q < q_low_cutoff] = 0.0
    if not np.any(amplitude > 0):
        raise FractoInputError("The low cutoff removes every wavenumber of this map.")
    spectrum *= amplitude
    return _to_rms(spectrum, (ny, nx), float(rms_um))
