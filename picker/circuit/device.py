"""The npn transistor: from a profile (hFE range, VBE, fT, Cob, Early voltage) to model parameters.

One set of Gummel-Poon-style parameters serves both the engine (DC point and
hybrid-pi small-signal model) and the SPICE deck, so that the simulator checks
the same device the engine assumed.

References
----------
Gummel-Poon model and its temperature scaling of IS: the SPICE2/SPICE3 BJT
model equations (L. W. Nagel, "SPICE2", UCB/ERL M520, 1975; ngspice manual,
chapter "BJTs").  Hybrid-pi model: P. R. Gray, P. J. Hurst, S. H. Lewis and
R. G. Meyer, "Analysis and Design of Analog Integrated Circuits", ch. 1.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import constants

#: Collector current at which the profile's VBE is taken, ampere (a convention of picker).
IC_REF_A = 1e-3
#: Nominal temperature of profile figures, kelvin (27 C is SPICE's TNOM default; picker uses 25 C).
TNOM_K = 298.15
#: Temperature exponent of IS and band gap (SPICE defaults for silicon).
XTI = 3.0
EG_EV = 1.11
#: Junction grading coefficients and built-in potentials (SPICE defaults).
MJC = 0.33
VJC_V = 0.75
MJE = 0.33
VJE_V = 0.75
FC = 0.5
#: Collector-base voltage at which Cob is quoted (rough common practice for small-signal parts).
COB_VCB_V = 10.0
#: Emitter junction zero-bias capacitance as a multiple of the collector's (rough, from memory).
CJE_PER_CJC = 2.0


def thermal_voltage(temp_c):
    """kT/q in volt at ``temp_c`` degrees Celsius (scipy.constants CODATA values)."""
    return constants.k * (np.asarray(temp_c, dtype=float) + constants.zero_Celsius) / constants.e


@dataclass(frozen=True)
class NpnProfile:
    """A generic npn transistor as the store holds it (SI units)."""

    name: str = "npn-generic"
    hfe_min: float = 100.0
    hfe_max: float = 300.0
    hfe_typ: float | None = None
    vbe_v: float = 0.65
    ft_hz: float = 250e6
    cob_f: float = 4e-12
    vaf_v: float = 100.0
    vceo_v: float = 40.0
    pd_w: float = 0.5
    extra: dict = field(default_factory=dict, compare=False)

    @property
    def hfe_nominal(self) -> float:
        """Typical hFE: the profile's own, else the geometric mean of min and max."""
        if self.hfe_typ:
            return float(self.hfe_typ)
        return float(np.sqrt(self.hfe_min * self.hfe_max))


@dataclass(frozen=True)
class NpnModel:
    """Model parameters (arrays broadcast over a batch), SPICE names in lower case."""

    is_a: np.ndarray
    bf: np.ndarray
    vaf_v: np.ndarray
    tf_s: np.ndarray
    cjc_f: np.ndarray
    cje_f: np.ndarray

    def spice_card(self, name: str = "QGEN", index: int = 0) -> str:
        g = lambda a: float(np.ravel(a)[index] if np.ndim(a) else a)  # noqa: E731
        return (
            f".model {name} NPN(IS={g(self.is_a):.6g} BF={g(self.bf):.6g} BR=1 "
            f"VAF={g(self.vaf_v):.6g} TF={g(self.tf_s):.6g} CJC={g(self.cjc_f):.6g} "
            f"MJC={MJC} VJC={VJC_V} CJE={g(self.cje_f):.6g} MJE={MJE} VJE={VJE_V} FC={FC} "
            f"XTI={XTI} EG={EG_EV} TNOM={TNOM_K - constants.zero_Celsius:.2f})"
        )


def model_from_profile(hfe, vbe_v, ft_hz, cob_f, vaf_v) -> NpnModel:
    """Derive model parameters from profile figures (arrays broadcast).

    IS puts VBE at ``IC_REF_A``; TF gives the profile's fT from the diffusion
    capacitance alone; CJC is the zero-bias capacitance that equals Cob at
    ``COB_VCB_V``.
    """
    vt = thermal_voltage(TNOM_K - constants.zero_Celsius)
    vbe_v = np.asarray(vbe_v, dtype=float)
    is_a = IC_REF_A / np.exp(vbe_v / vt)
    cjc = np.asarray(cob_f, dtype=float) * (1.0 + COB_VCB_V / VJC_V) ** MJC
    tf = 1.0 / (2.0 * np.pi * np.asarray(ft_hz, dtype=float))
    return NpnModel(
        is_a=is_a,
        bf=np.asarray(hfe, dtype=float),
        vaf_v=np.asarray(vaf_v, dtype=float),
        tf_s=tf,
        cjc_f=cjc,
        cje_f=CJE_PER_CJC * cjc,
    )


def is_at(model: NpnModel, temp_c) -> np.ndarray:
    """Saturation current at ``temp_c`` by SPICE's law (XTI, EG), ampere."""
    t = np.asarray(temp_c, dtype=float) + constants.zero_Celsius
    ratio = t / TNOM_K
    vt = constants.k * t / constants.e
    return model.is_a * ratio**XTI * np.exp(EG_EV / vt * (ratio - 1.0))


def junction_c(c0_f, v_forward, vj_v: float, m: float) -> np.ndarray:
    """Depletion capacitance at forward voltage ``v_forward`` (SPICE's form, FC extension)."""
    v = np.asarray(v_forward, dtype=float)
    lin = c0_f / (1 - FC) ** (1 + m) * (1 - FC * (1 + m) + m * v / vj_v)
    with np.errstate(invalid="ignore"):
        dep = c0_f / np.power(np.maximum(1 - v / vj_v, 1e-9), m)
    return np.where(v < FC * vj_v, dep, lin)
