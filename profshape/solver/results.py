"""The result of one solver run."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd

__all__ = ["CELL_COLUMNS", "GLOBAL_DESCRIPTIONS", "SolverResult", "SolverStatus"]

#: The outcome of one solver run (see :class:`SolverResult`).
SolverStatus = Literal["ok", "oscillating", "not_converged", "failed"]

#: Per-cell output columns (time averages over the averaging window) and units.
CELL_COLUMNS: dict[str, str] = {
    "z_m": "cell centre, distance from the anode [m]",
    "ion_velocity_m_s": "density-weighted mean ion velocity <n u>/<n> [m/s]",
    "plasma_density_m3": "plasma (ion = electron) density [m^-3]",
    "neutral_density_m3": "neutral density [m^-3]",
    "electron_temperature_eV": "electron temperature [eV]",
    "potential_V": "plasma potential, anode at the discharge voltage, cathode plane at 0 [V]",
    "electric_field_V_m": "axial electric field E = -dphi/dz [V/m]",
    "anomalous_frequency_per_s": "anomalous collision frequency [1/s]",
    "magnetic_field_T": "radial magnetic field [T] (scaled for the operating point)",
    "collision_frequency_per_s": "total electron momentum-transfer frequency [1/s]",
    "ion_current_A": "ion current e A <n u_i> [A]",
    "electron_current_A": "electron current I_d - I_ion (quasi-neutral current continuity) [A]",
    "wall_secondary_yield": "effective secondary-electron yield of the channel walls [-]",
    "ion_mean_energy_eV": "mean kinetic energy per ion <q_i>/<n> from the ion energy equation "
    "(directed energy and the spread of ions born at different potentials) [eV]",
}

#: Global outputs and their units.
GLOBAL_DESCRIPTIONS: dict[str, str] = {
    "discharge_current_A": "time-averaged discharge current [A]",
    "discharge_power_W": "discharge voltage times current [W]",
    "thrust_N": "ion + neutral momentum flux through the cathode plane, including the "
    "momentum that charge exchange hands to fast neutrals [N]",
    "charge_exchange_thrust_N": "momentum flux of the fast neutrals made by charge exchange "
    "(their share of thrust_N) [N]",
    "ion_birth_potential_V": "ionization-weighted mean plasma potential where the ions are "
    "born [V]; over V_d, the voltage utilization that collisionless ions would reach "
    "without wall and charge-exchange losses [V]",
    "ion_momentum_balance_error": "(ion momentum out - in at the anode) / (electric force + "
    "ionization momentum - wall and ion-neutral momentum losses) - 1, accumulated "
    "separately [-]",
    "specific_impulse_s": "thrust / (anode mass flow * g0) [s]",
    "anode_efficiency": "thrust^2 / (2 * mass flow * discharge power) [-]",
    "mass_utilization": "ion mass flow through the cathode plane / anode mass flow [-]",
    "current_utilization": "ion (beam) current at the cathode plane / discharge current [-]",
    "voltage_utilization": "exit ion energy / discharge voltage [-]",
    "exit_ion_energy_eV": "flux-weighted mean ion kinetic energy at the cathode plane "
    "M <n u^3>/<n u>/2e [eV], from the ion energy equation (with ion_energy_equation = 0: "
    "from the fluid velocity, M u^2 / 2e)",
    "effective_exit_velocity_m_s": "ion momentum flux / ion number flux at the cathode plane [m/s]",
    "max_ion_velocity_m_s": "largest time-averaged ion velocity over the cells [m/s]",
    "ion_energy_bound_velocity_m_s": "energy bound sqrt(2 e max(V_d + anode fall, phi_max) / M) "
    "[m/s]",
    "anode_ion_current_A": "ion current into the anode (Bohm sink) [A]",
    "wall_ion_current_A": "ion current to the channel walls (recombined into neutrals) [A]",
    "anode_fall_V": "plasma potential at the anode sheath edge minus V_d (> 0: electron-"
    "repelling sheath) [V]",
    "max_potential_V": "largest time-averaged plasma potential [V]",
    "ingested_mass_flow_kg_s": "background gas ingested through the cathode plane [kg/s]",
    "oscillation_peak_to_peak_A": "peak-to-peak discharge current over the averaging range [A]",
    "oscillation_periods": "oscillation periods in the averaging range (0 if quiescent) [-]",
    "ion_balance_error": "(ions out through anode, cathode plane and walls) / ions created - 1, "
    "from boundary fluxes and volume sources accumulated separately [-]",
    "continuity_residual": "max over cells of the time-averaged ion continuity residual "
    "|d<Gamma_i>/dz + d<n>/dt - <S>| times the domain length / beam flux [-]",
    "exit_ion_velocity_m_s": "density-weighted ion velocity in the last cell [m/s]",
    "channel_exit_ion_velocity_m_s": "ion velocity at the channel exit plane [m/s]",
    "beam_current_A": "ion current through the cathode plane [A]",
    "peak_electron_temperature_eV": "maximum of the time-averaged electron temperature [eV]",
    "oscillation_amplitude_A": "rms (standard deviation) of the discharge current [A]",
    "oscillation_relative_amplitude": "oscillation_amplitude_A / discharge_current_A [-]",
    "oscillation_frequency_Hz": "dominant frequency of the current (0 if relative amplitude < 1 %) [Hz]",
    "converged": 'whether the convergence test passed (status "ok" or "oscillating")',
    "status": '"ok", "oscillating", "not_converged" or "failed"',
    "reason": "why the run stopped",
    "mass_balance_error": "(outlet ion + neutral flow) / anode flow - 1 over the window [-]",
    "statistical_uncertainty": "relative standard error of the averaged current / exit velocity "
    "from the cycle-to-cycle scatter (0 for a non-oscillating discharge) [-]",
    "floor_fraction": "fraction of cell-steps that hit a floor or ceiling [-]",
    "simulated_time_s": "simulated time [s]",
    "averaging_time_s": "length of the averaging window [s]",
    "n_steps": "number of time steps",
    "n_cells": "number of cells",
    "averaging_start_s": "simulated time at which the averaging window starts [s]",
    "warm_start": "whether the start-up transient ran on the coarse warm-up grid",
    "wall_time_s": "wall-clock time of the solve [s]",
}


@dataclass
class SolverResult:
    """Outcome of :func:`profshape.solver.solve`.

    Attributes
    ----------
    status : {"ok", "oscillating", "not_converged", "failed"}
        ``"ok"``: converged, quiescent (current rms below 1 %) and finite.
        ``"oscillating"``: converged in the mean over at least
        ``SolverSettings.min_oscillation_periods`` periods; the rms,
        peak-to-peak amplitude and dominant frequency are in :attr:`globals`.
        ``"not_converged"``: finite averages
        but the convergence test failed (see :attr:`reason`). ``"failed"``:
        the march diverged; :attr:`cells` may be empty.
    reason : str
        Human-readable reason for the status.
    cells : pandas.DataFrame
        Per-cell time averages, columns :data:`CELL_COLUMNS`.
    globals : dict
        Global outputs, keys :data:`GLOBAL_DESCRIPTIONS`.
    history : dict of str to ndarray
        ``"time_s"`` and ``"discharge_current_A"`` over the averaging window.
    """

    status: SolverStatus
    reason: str
    cells: pd.DataFrame
    globals: dict[str, float | bool | str]
    history: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def converged(self) -> bool:
        """True when :attr:`status` is ``"ok"`` or ``"oscillating"`` (usable averages)."""
        return self.status in ("ok", "oscillating")

    @property
    def z_m(self) -> np.ndarray:
        """Cell centres [m] (empty for a failed run without averages)."""
        if "z_m" not in self.cells:
            return np.empty(0)
        return self.cells["z_m"].to_numpy()

    @property
    def ion_velocity_m_s(self) -> np.ndarray:
        """Time-averaged ion velocity per cell [m/s]."""
        if "ion_velocity_m_s" not in self.cells:
            return np.empty(0)
        return self.cells["ion_velocity_m_s"].to_numpy()

    def __repr__(self) -> str:
        g = self.globals
        cur = g.get("discharge_current_A", float("nan"))
        return (
            f"SolverResult(status={self.status!r}, reason={self.reason!r}, "
            f"discharge_current_A={cur!r}, n_cells={len(self.cells)})"
        )
