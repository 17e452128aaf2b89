"""The probability model that picks each grain's fracture mode.

For a grain of equivalent diameter ``d`` (µm) broken at test temperature ``T``
with transition temperature ``T_t`` (both °C), write ``ΔT = T - T_t``. Then

(plain notation, all probabilities per grain)::

    p_fat   = f_fatigue
    S       = 1/2 · [1 + tanh((ΔT − k_d · ln(d / d_ref)) / C)]
    p_duc   = (1 − p_fat) · U · S
    g(d)    = 1 / (1 + exp(−(d − d_c) / s_c))
    q_IG    = clip(b_IG + a_IG · exp(−½ ((ΔT − Δ_IG) / w_IG)²) · g(d), 0, 1)
    p_IG    = (1 − p_fat − p_duc) · q_IG
    p_TG    = 1 − p_fat − p_duc − p_IG

* the ductile share follows the hyperbolic-tangent shape of a ductile-to-brittle
  transition (Oldfield 1975) with upper-shelf share ``U`` and width ``C``;
  coarse grains shift the transition upwards by ``k_d ln(d/d_ref)`` (finer
  grains lower the transition temperature: common practice for ferritic
  steels);
* the brittle remainder splits into intergranular and transgranular; the
  intergranular share has a base ``b_IG`` and a Gaussian peak of height
  ``a_IG`` and width ``w_IG`` centred ``Δ_IG`` from the transition, active
  only in coarse grains (``g(d)``: a logistic switch at ``d_c`` of width
  ``s_c``) — the picture of coarse grains turning intergranular near a phase
  transition in ferroelectric ceramics.

Grain modes are drawn with spatial coherence but exact marginals: the uniform
variate of grain ``i`` is ``u_i = Φ(√ρ F(c_i) + √(1-ρ) ε_i)``, with ``F`` a
unit Gaussian random field evaluated at the grain centre ``c_i`` (correlation
length ``patch_um``), ``ε_i`` independent standard normal and Φ the normal
CDF; ``u_i`` is uniform for any ρ, so ``P(mode) = p`` exactly, while
neighbouring grains tend to share ductile or fatigue modes (patches).

References
----------
.. [1] W. Oldfield, "Curve fitting impact test data: a statistical procedure",
   *ASTM Standardization News* 3 (1975) 24-29 (tanh transition curves).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.special import ndtr

from fracto.classes import MODES
from fracto.errors import FractoInputError

__all__ = ["ModeModel"]


@dataclass(frozen=True)
class ModeModel:
    """Parameters of the grain-mode probability model (see the module docstring).

    Parameters
    ----------
    upper_shelf_ductile : float
        U, ductile share well above the transition (0 for ceramics).
    width_C : float
        C, width of the tanh switch (°C).
    size_shift_C : float
        k_d, shift of the transition per unit ln(d / d_ref) (°C).
    reference_size_um : float
        d_ref (µm).
    ig_base : float
        b_IG, intergranular share of the brittle fracture away from the peak.
    ig_peak : float
        a_IG, height of the intergranular peak.
    ig_width_C : float
        w_IG, width (σ) of the peak (°C).
    ig_offset_C : float
        Δ_IG, position of the peak relative to the transition (°C).
    coarse_size_um : float
        d_c, grain size where the coarse-grain switch g(d) is 1/2 (µm).
    coarse_width_um : float
        s_c, width of the switch (µm).
    fatigue_fraction : float
        f_fatigue, fatigue share (independent of temperature).
    spatial_correlation : float
        ρ in [0, 1): how strongly neighbouring grains share a mode.
    patch_um : float
        Correlation length of the patch field (µm).
    """

    upper_shelf_ductile: float = 1.0
    width_C: float = 20.0
    size_shift_C: float = 0.0
    reference_size_um: float = 2.0
    ig_base: float = 0.1
    ig_peak: float = 0.0
    ig_width_C: float = 15.0
    ig_offset_C: float = 0.0
    coarse_size_um: float = 4.0
    coarse_width_um: float = 0.5
    fatigue_fraction: float = 0.0
    spatial_correlation: float = 0.6
    patch_um: float = 10.0

    def __post_init__(self) -> None:
        for name in ("upper_shelf_ductile", "ig_base", "ig_peak", "fatigue_fraction"):
            v = getattr(self, name)
            if not (math.isfinite(v) and 0.0 <= v <= 1.0):
                raise FractoInputError(f"The mode-model parameter {name} must lie in 0..1.")
        for name in ("width_C", "ig_width_C", "reference_size_um", "coarse_width_um", "patch_um"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise FractoInputError(f"The mode-model parameter {name} must be positive.")
        if not (0.0 <= self.spatial_correlation < 1.0):
            raise FractoInputError("The spatial correlation of grain modes must lie in [0, 1).")

    @classmethod
    def steel(cls, **kw: float) -> ModeModel:
        """Ductile-to-brittle transition of a ferritic steel: dimples above, cleavage below."""
        base = dict(upper_shelf_ductile=1.0, width_C=18.0, ig_base=0.08, ig_peak=0.0)
        base.update(kw)
        return cls(**base)

    @classmethod
    def ceramic(cls, **kw: float) -> ModeModel:
        """Brittle ceramic with an intergranular peak in coarse grains near a phase transition."""
        base = dict(
            upper_shelf_ductile=0.0,
            ig_base=0.2,
            ig_peak=0.7,
            ig_width_C=20.0,
            coarse_size_um=3.0,
            coarse_width_um=0.6,
            spatial_correlation=0.3,
        )
        base.update(kw)
        return cls(**base)

    def probabilities(self, grain_size_um: np.ndarray, delta_T_C: float) -> np.ndarray:
        """Mode probabilities of each grain, shape (n, 4) in the order of MODES."""
        d = np.asarray(grain_size_um, float)
        dT = float(delta_T_C)
        p_fat = np.full(d.shape, self.fatigue_fraction)
        shift = self.size_shift_C * np.log(np.maximum(d, 1e-6) / self.reference_size_um)
        s = 0.5 * (1.0 + np.tanh((dT - shift) / self.width_C))
        p_duc = (1.0 - p_fat) * self.upper_shelf_ductile * s
        g = 1.0 / (1.0 + np.exp(-(d - self.coarse_size_um) / self.coarse_width_um))
        peak = math.exp(-0.5 * ((dT - self.ig_offset_C) / self.ig_width_C) ** 2)
        q_ig = np.clip(self.ig_base + self.ig_peak * peak * g, 0.0, 1.0)
        brittle = 1.0 - p_fat - p_duc
        p_ig = brittle * q_ig
        p_tg = brittle - p_ig
        out = np.stack([p_ig, p_tg, p_duc, p_fat], axis=-1)
        assert out.shape[-1] == len(MODES)
        return out

    def draw(
        self,
        grain_size_um: np.ndarray,
        delta_T_C: float,
        patch_field: np.ndarray,
        rng: np.random.Generator,
    ) -> np.ndarray:
        """Draw one mode index (0-based into MODES) per grain.

        Parameters
        ----------
        grain_size_um : ndarray (n,)
            Equivalent diameters.
        delta_T_C : float
            T − T_t.
        patch_field : ndarray (n, 2)
            Two unit Gaussian field values per grain (ductile, fatigue patches).
        rng : numpy Generator
        """
        p = self.probabilities(grain_size_um, delta_T_C)
        n = len(p)
        r = math.sqrt(self.spatial_correlation)
        q = math.sqrt(1.0 - self.spatial_correlation)
        u_fat = ndtr(r * patch_field[:, 1] + q * rng.standard_normal(n))
        u_duc = ndtr(r * patch_field[:, 0] + q * rng.standard_normal(n))
        u_ig = rng.uniform(size=n)
        mode = np.full(n, 1, np.int64)  # transgranular
        fat = u_fat < p[:, 3]
        # ductile given not fatigue: P = p_duc / (1 - p_fat)
        duc = ~fat & (u_duc * (1.0 - p[:, 3]) < p[:, 2])
        rest = ~fat & ~duc
        brittle = np.maximum(p[:, 0] + p[:, 1], 1e-12)
        ig = rest & (u_ig < p[:, 0] / brittle)
        mode[fat] = 3
        mode[duc] = 2
        mode[ig] = 0
        return mode

    def to_dict(self) -> dict:
        """JSON-ready form."""
        return asdict(self)
