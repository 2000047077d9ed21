"""Propellant gases: atomic mass and first ionization energy.

Sources
-------
- Standard atomic weights: IUPAC/CIAAW (Xe 131.293, Kr 83.798, Ar 39.95).
- First ionization energies: NIST Atomic Spectra Database
  (Xe 12.1298 eV, Kr 13.9996 eV, Ar 15.7596 eV).
- Atomic mass constant: CODATA 2018 via :mod:`profshape.constants` (from :mod:`scipy.constants`).

The test-suite checks these against PlasmaPy's particle data.
"""

from __future__ import annotations

from dataclasses import dataclass

from . import constants
from .exceptions import InputDataError

__all__ = ["PROPELLANTS", "Propellant", "get_propellant"]


@dataclass(frozen=True)
class Propellant:
    """A propellant gas.

    Attributes
    ----------
    name : str
        Lower-case name, e.g. ``"xenon"``.
    symbol : str
        Chemical symbol, e.g. ``"Xe"``.
    atomic_weight : float
        Standard atomic weight [u].
    ionization_energy_eV : float
        First ionization energy [eV].
    """

    name: str
    symbol: str
    atomic_weight: float
    ionization_energy_eV: float

    @property
    def mass_kg(self) -> float:
        """Atomic mass [kg] (neutral atom)."""
        return float(self.atomic_weight * constants.amu)

    @property
    def ion_mass_kg(self) -> float:
        """Mass of the singly charged ion [kg]."""
        return float(self.mass_kg - constants.m_e)

    def max_ion_velocity(self, voltage_V: float) -> float:
        """Energy-conservation bound sqrt(2 e V / M) on ion speed [m/s]."""
        return float((2.0 * constants.e * voltage_V / self.ion_mass_kg) ** 0.5)


PROPELLANTS: dict[str, Propellant] = {
    "xenon": Propellant("xenon", "Xe", 131.293, 12.1298),
    "krypton": Propellant("krypton", "Kr", 83.798, 13.9996),
    "argon": Propellant("argon", "Ar", 39.95, 15.7596),
}
_ALIASES = {p.symbol.lower(): p.name for p in PROPELLANTS.values()}


def get_propellant(name: str | Propellant, field: str = "propellant") -> Propellant:
    """Look a propellant up by name or chemical symbol (case-insensitive).

    Parameters
    ----------
    name : str or Propellant
        ``"xenon"``, ``"Xe"``, ``"krypton"``, ``"Kr"``, ...
    field : str, default="propellant"
        Name of the input field, used in the error message.

    Raises
    ------
    InputDataError
        If the propellant is unknown; the message lists the known ones.
    """
    if isinstance(name, Propellant):
        return name
    key = str(name).strip().lower()
    key = _ALIASES.get(key, key)
    if key not in PROPELLANTS:
        raise InputDataError(
            f"{field}: unknown propellant {name!r}; use one of "
            f"{sorted(PROPELLANTS)} (or their symbols)."
        )
    return PROPELLANTS[key]
