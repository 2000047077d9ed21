"""Names, units and producers of the observables a calibration can compare with data.

Two kinds of observable exist:

profile observables
    Values along the axis ``z`` at one operating point: ``ion_velocity`` [m/s],
    ``plasma_potential`` [V], ``electron_temperature`` [eV] and
    ``plasma_density`` [m^-3] (:data:`PROFILE_UNITS`). A forward model returns
    them on its ``z_m`` grid (:attr:`profshape.forward.base.Prediction.profiles`;
    the ion velocity also as ``ion_velocity_m_s``).
scalar observables
    One number per operating point (:data:`profshape.data.SCALAR_UNITS`):
    ``discharge_current`` [A], ``thrust`` [N], ``ion_beam_current`` [A],
    ``discharge_current_rms_amplitude`` [A] and ``discharge_current_frequency``
    [Hz] of the current's oscillation (derived from a measured trace by
    :func:`profshape.traces.summarize_trace`), and a few efficiencies.

A forward model declares what it produces with the class attributes
``profile_names`` and ``scalar_names`` (tuples of names; ``None``: unknown, as
for a Python callable). :func:`check_producible` refuses, before any forward
run, a data set that names an observable the model does not produce.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from typing import Any

from .exceptions import InputDataError

__all__ = ["FIELD_OF_PROFILE", "PROFILE_UNITS", "SCALAR_UNITS", "check_producible", "produced_names",
           "split_discrepancy", "unknown_profile_message"]

#: SI units of the scalar observables the built-in solver predicts.
SCALAR_UNITS: dict[str, str] = {
    "discharge_current": "A",
    "thrust": "N",
    "specific_impulse": "s",
    "anode_efficiency": "-",
    "mass_utilization": "-",
    "current_utilization": "-",
    "voltage_utilization": "-",
    "exit_ion_energy_eV": "eV",
    "ion_beam_current": "A",
    "discharge_current_rms_amplitude": "A",
    "discharge_current_frequency": "Hz",
}

#: Profile observables and their SI units (eV for the electron temperature).
PROFILE_UNITS: dict[str, str] = {
    "ion_velocity": "m/s",
    "plasma_potential": "V",
    "electron_temperature": "eV",
    "plasma_density": "m^-3",
}

#: Built-in solver cell column of each profile observable other than the ion velocity.
FIELD_OF_PROFILE: dict[str, str] = {
    "plasma_potential": "potential_V",
    "electron_temperature": "electron_temperature_eV",
    "plasma_density": "plasma_density_m3",
}


def unknown_profile_message(name: str) -> str:
    """``unknown profile observable 'x' (did you mean 'y'?); the known ones are [...]``."""
    near = difflib.get_close_matches(str(name), list(PROFILE_UNITS), n=1, cutoff=0.6)
    hint = f" (did you mean {near[0]!r}?)" if near else ""
    return (f"unknown profile observable {name!r}{hint}; the known ones are "
            f"{sorted(PROFILE_UNITS)}")


def split_discrepancy(table: Any) -> dict[str, dict[str, float]]:
    """A per-observable discrepancy table (``[likelihood] discrepancy``) as keyword
    arguments of :class:`~profshape.likelihood.LikelihoodSettings`.

    Profile observables (:data:`PROFILE_UNITS`, not ``ion_velocity``, whose discrepancy
    is ``discrepancy_sigma_m_s``) take an absolute sigma in their SI unit; any other
    name is a scalar and takes a sigma relative to its measured value.

    Raises
    ------
    InputDataError
        For ``ion_velocity``, a near miss of a known name, or a value that is
        not a number.
    """
    profile: dict[str, float] = {}
    scalar: dict[str, float] = {}
    for key, value in dict(table).items():
        if key == "ion_velocity":
            raise InputDataError("likelihood.discrepancy.ion_velocity: the ion velocity's "
                                 "discrepancy is likelihood.discrepancy_sigma_m_s [m/s]; set "
                                 "that instead.")
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputDataError(f"likelihood.discrepancy.{key}: must be a number >= 0; got "
                                 f"{value!r}.")
        known = [*PROFILE_UNITS, *SCALAR_UNITS]
        near = difflib.get_close_matches(str(key), known, n=1, cutoff=0.75)
        if key not in known and near:  # a near miss of a known name is a typo
            raise InputDataError(f"likelihood.discrepancy.{key}: unknown observable (did you "
                                 f"mean {near[0]!r}?); rename the key.")
        (profile if key in PROFILE_UNITS else scalar)[str(key)] = float(value)
    return {"profile_discrepancy": profile, "scalar_discrepancy": scalar}


def produced_names(model: Any, attribute: str) -> tuple[str, ...] | None:
    """The model's declared ``profile_names`` or ``scalar_names`` (through a cache
    wrapper's ``model``), or ``None`` when it declares nothing."""
    names = getattr(model, attribute, None)
    inner = getattr(model, "model", None)
    if names is None and inner is not None:
        names = getattr(inner, attribute, None)
    return None if names is None else tuple(str(n) for n in names)


def check_producible(dataset: Any, model: Any, *, where: Sequence[str] | None = None) -> None:
    """Refuse profile observables in ``dataset`` that ``model`` does not produce.

    Parameters
    ----------
    dataset : DataSet
    model : ForwardModel
        Its ``profile_names`` (if declared) are what it produces.
    where : sequence of str, optional
        Where each point's data came from (for the message); default the
        data's own source file.

    Raises
    ------
    InputDataError
        Naming the point, the observable, the source file and row, what the
        model produces, and the fix.
    """
    produced = produced_names(model, "profile_names")
    if produced is None:
        return
    for i, point in enumerate(dataset):
        wanted = dict(getattr(point, "profiles", {}) or {})
        if point.ion_velocity is not None:
            wanted.setdefault("ion_velocity", point.ion_velocity)
        for name, meas in wanted.items():
            if name in produced:
                continue
            src = where[i] if where is not None else getattr(meas, "source", "") or "data"
            rows = getattr(meas, "rows", None)
            at = f", row {rows[0]}" if rows else ""
            near = difflib.get_close_matches(name, list(produced), n=1, cutoff=0.6)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise InputDataError(
                f"{src}{at}, column 'observable': operating point {point.label!r} has "
                f"{name!r} data, but the forward model {getattr(model, 'name', '?')!r} does not "
                f"produce it{hint}; it produces {sorted(produced)}. Remove those rows, or use a "
                "forward model that computes it."
            )
