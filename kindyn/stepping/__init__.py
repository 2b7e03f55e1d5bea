"""Time stepping: Runge–Kutta tableaux as data and the integrating-factor stepper."""

from kindyn.stepping.integrating_factor import IntegratingFactorStepper
from kindyn.stepping.tableaux import TABLEAUX, Tableau

__all__ = ["IntegratingFactorStepper", "TABLEAUX", "Tableau"]
