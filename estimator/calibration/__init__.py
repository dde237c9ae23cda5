"""Static calibration of the force cell with known loads: forces, fit, error table, limits.

The numbers only; reading the calibration sheet is `daq.calsheet`, the command is in `ui`.
Formulas and sources are in docs/method-calibration.md. In short:

* Deadweight force from conventional mass (OIML R 111-1:2004 convention, reference air
  density ``ρ0 = 1.2 kg/m³``, reference density ``ρc = 8000 kg/m³``)::

      F = m_c·g·(1 − ρ0/ρc)·(1 − ρa/ρ)/(1 − ρ0/ρ)

* Least-squares polynomial of the deflection as a function of the force, degree 1..3,
  with or without a constant term, with the coefficient covariance
  ``s²·(XᵀX)⁻¹`` (``s²`` the residual variance on ``ν = n − p`` degrees of freedom).
* ISO 376:2011-style relative errors per force step (reproducibility ``b``,
  repeatability ``b′``, interpolation ``fc``, zero ``f0``, reversibility ``v``) and the
  class each step meets; the class limits are quoted from memory (`ISO376_CLASS_LIMITS`).
* ASTM E74-style standard deviation of the fit in force units, lower limit factor
  ``LLF = 2.4·s`` (not below the resolution) and the class A / AA lower force limits
  ``400·LLF`` / ``2000·LLF`` (factors from memory).
* Stiffness ``k = 1/c1`` of a straight-line fit with ``u(k) = u(c1)/c1²`` (GUM,
  JCGM 100:2008, first-order propagation, 5.1.2).

Units: forces N, masses kg, densities kg/m³, g m/s², readings and deflections m.
Relative errors are fractions (0.001 is 0.1 %); `StaticCalibration.text` shows them in %.
A *deflection* is a reading under load minus the zero reading taken before the series.

The package holds one concept per module: `deadweights`, `data`, `fit`, `iso376`, `e74`,
`static` (the whole), and the shared `checks`.
"""

from __future__ import annotations

from estimator.calibration.data import CalibrationPoint, CalibrationSet
from estimator.calibration.deadweights import (
    CONVENTIONAL_AIR_DENSITY_KG_M3,
    CONVENTIONAL_WEIGHT_DENSITY_KG_M3,
    deadweight_force_n,
    forces_from_sheet,
)
from estimator.calibration.e74 import (
    E74_CLASS_A_FACTOR,
    E74_CLASS_AA_FACTOR,
    E74_LLF_FACTOR,
    E74Limits,
    e74_limits,
)
from estimator.calibration.fit import StaticFit, fit_static
from estimator.calibration.iso376 import (
    ISO376_CLASS_LIMITS,
    Iso376Limits,
    Iso376Result,
    Iso376Step,
    evaluate_iso376,
)
from estimator.calibration.static import StaticCalibration, calibrate_static

__all__ = [
    "CONVENTIONAL_AIR_DENSITY_KG_M3",
    "CONVENTIONAL_WEIGHT_DENSITY_KG_M3",
    "E74_CLASS_AA_FACTOR",
    "E74_CLASS_A_FACTOR",
    "E74_LLF_FACTOR",
    "ISO376_CLASS_LIMITS",
    "CalibrationPoint",
    "CalibrationSet",
    "E74Limits",
    "Iso376Limits",
    "Iso376Result",
    "Iso376Step",
    "StaticCalibration",
    "StaticFit",
    "calibrate_static",
    "deadweight_force_n",
    "e74_limits",
    "evaluate_iso376",
    "fit_static",
    "forces_from_sheet",
]
