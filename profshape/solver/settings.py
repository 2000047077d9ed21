"""Numerical settings of the built-in discharge solver."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from numbers import Integral, Real

from ..exceptions import InputDataError
from ..validation import Constraint, Interval, Options, validate_dataclass

__all__ = ["CONSTRAINTS", "SolverSettings"]

#: Wall materials with a secondary-electron yield fit (see profshape.solver.walls).
_WALL_MATERIALS = ("boron_nitride", "alumina", "borosil", "constant")


def _ints(lo: int, hi: int) -> list[Constraint | None]:
    return [Interval(Integral, lo, hi, closed="both")]


def _reals(lo: float, hi: float) -> list[Constraint | None]:
    return [Interval(Real, lo, hi, closed="both")]


#: Constraints of every field (see :mod:`profshape.validation`).
CONSTRAINTS: dict[str, list[Constraint | None]] = {
    "wall_material": [Options(str, _WALL_MATERIALS, normalise=lambda v: v.strip().lower())],
    "n_cells": _ints(20, 4000),
    "n_average_windows": _ints(1, 20),
    "ion_scheme_order": _ints(1, 2),
    "warmup_coarsening": _ints(1, 8),
    "time_order": _ints(1, 2),
    "min_oscillation_periods": _ints(2, 50),
    "cfl": _reals(0.05, 0.95),
    "window_s": _reals(1e-6, 1e-2),
    "min_time_s": _reals(0.0, 0.1),
    "warmup_time_s": _reals(0.0, 0.1),
    "max_time_s": _reals(1e-6, 1.0),
    "tolerance": _reals(1e-5, 0.5),
    "mass_tolerance": _reals(1e-5, 0.5),
    "max_time_step_s": _reals(1e-12, 1e-5),
    "sample_interval_s": _reals(1e-10, 1e-5),
    "density_floor_m3": _reals(1.0, 1e16),
    "electron_temperature_floor_eV": _reals(0.01, 5.0),
    "electron_temperature_ceiling_eV": _reals(10.0, 400.0),
    "wall_secondary_yield": _reals(0.0, 0.98),
    "wall_loss_scale": _reals(0.0, 10.0),
    "max_floor_fraction": _reals(0.0, 1.0),
    "wall_transition_gaps": _reals(0.02, 5.0),
    "ion_neutral_collision_scale": _reals(0.0, 10.0),
    "quiescent_window_fraction": _reals(0.05, 1.0),
    "energy_bound_tolerance": _reals(0.0, 0.2),
    "ion_energy_equation": _ints(0, 1),
    "wall_reemission_upstream_fraction": _reals(0.0, 1.0),
}


@dataclass(frozen=True)
class SolverSettings:
    """Grid, time-march and model options of :func:`profshape.solver.solve`.

    Parameters
    ----------
    n_cells : int, default=160
        Number of uniform axial cells between anode and cathode plane.
    cfl : float, default=0.6
        Courant number on the ion fast speed ``|u_i| + c_s``.
    window_s : float, default=7.5e-5
        Length of one averaging window [s].
    min_time_s : float, default=2.5e-5
        Transient discarded on the solver grid (after the warm-up) before
        windows are compared [s].
    max_time_s : float, default=1.2e-3
        Simulated-time limit [s]; reaching it gives status "not_converged".
    n_average_windows : int, default=2
        Number of consecutive windows averaged for the result; they must
        agree to within ``tolerance`` for convergence.
    tolerance : float, default=0.01
        Convergence tolerance: relative change of the window-averaged
        discharge current and exit ion velocity between consecutive windows.
    mass_tolerance : float, default=0.01
        Required heavy-particle balance ``|outlet flow / anode flow - 1|`` over
        the averaging window.
    max_time_step_s : float, default=5e-8
        Upper bound on the time step [s].
    sample_interval_s : float, default=1e-7
        Sampling interval of the discharge-current history [s].
    density_floor_m3 : float, default=1e13
        Plasma density floor [m^-3].
    electron_temperature_floor_eV, electron_temperature_ceiling_eV : float
        Clip range of T_e [eV] (defaults 0.5 and 250).
    wall_material : str, default="boron_nitride"
        Channel-wall material whose secondary-electron yield sigma(T_e) is
        used (``"boron_nitride"``, ``"alumina"``, ``"borosil"``, a boron
        nitride - silica ceramic; or ``"constant"`` for
        ``wall_secondary_yield``); see :mod:`profshape.solver.walls`. The
        yield is capped at the space-charge-saturated value.
    wall_secondary_yield : float, default=0.5
        Constant effective secondary-electron yield, used only with
        ``wall_material = "constant"``, in [0, 0.98].
    wall_loss_scale : float, default=1.0
        Multiplier on the wall fluxes of all species (ion loss, neutral
        re-emission, electron collection and sheath energy loss); 0 switches
        the walls off.
    wall_transition_gaps : float, default=0.25
        Width of the smooth (tanh) fade-out of the wall terms across the
        channel exit plane, in channel gaps (r_o - r_i).
    ion_neutral_collision_scale : float, default=1.0
        Multiplier on the charge-exchange and elastic ion-neutral momentum
        transfer (0 switches them off).
    time_order : {1, 2}, default=2
        Time integration of ions and neutrals: 1 = forward Euler, 2 = SSP-RK2
        (Shu and Osher 1988).
    min_oscillation_periods : int, default=5
        An oscillating discharge is accepted only when every averaging span
        holds at least this many periods in total.
    quiescent_window_fraction : float, default=0.25
        Quiescent fast path: when the current's relative rms is below 1 %,
        windows of this fraction of ``window_s`` are compared, with the
        tolerance scaled by the same fraction (the same bound on the drift
        rate, tolerance / window_s).
    energy_bound_tolerance : float, default=0.02
        Relative margin on the ion energy bound: a run whose peak ion speed
        exceeds (1 + margin) sqrt(2 e phi_max / M), whose exit ion energy
        exceeds (1 + margin) (V_d + anode fall), or whose potential rises
        above V_d + anode fall by more than margin * V_d plus 2 T_e (the
        anode pre-sheath), is "failed" with the reason.
    max_floor_fraction : float, default=0.02
        Largest fraction of cell-steps that may hit a floor or ceiling in the
        averaging window before the result is marked "not_converged".
    ion_scheme_order : {1, 2}, default=2
        Spatial order of the ion fluxes: 1 = first-order Rusanov, 2 = MUSCL
        reconstruction of density and velocity (van Leer limiter; also used
        for the neutrals).
    warmup_time_s : float, default=2.0e-4
        Start-up transient marched first on a grid ``warmup_coarsening``
        times coarser (cheaper), then interpolated onto the solver grid; the
        convergence test runs on the solver grid only. 0 disables it; if the
        coarse march fails the run starts from scratch on the solver grid.
        With ``wall_reemission_upstream_fraction`` > 0 the gas re-emitted
        upstream recirculates through the anode (about 100 us per pass on the
        demo device): use about 4e-4 s then.
    warmup_coarsening : int, default=2
        Coarsening factor of the warm-up grid (1 disables the warm-up).
    wall_reemission_upstream_fraction : float, default=0.0
        Fraction of the neutrals re-emitted by the channel walls (recombined
        ions) that move upstream; diffuse (cosine-law) emission at the wall
        temperature has a symmetric axial velocity distribution, hence 0.5
        (kinetic theory, textbook). 0 (the default for now) sends all of them
        downstream. 0.5 is the physical value; it raises voltage utilization
        (0.62 -> 0.72 on the demo device at 300 V) but makes the demo's truth
        oscillate and lengthens the start-up; it becomes the default once the
        search and the demo are checked with it.
    ion_energy_equation : {0, 1}, default=1
        1: the ions' total kinetic energy is carried by its own conservation
        equation (electric work, birth, wall and ion-neutral losses), so the
        exit ion energy keeps the energy of ions born at different potentials
        that a single velocity per cell cannot hold; it does not act back on
        the momentum. 0: the exit energy from the fluid velocity, M u^2 / 2.
    """

    n_cells: int = 160
    cfl: float = 0.6
    window_s: float = 7.5e-5
    min_time_s: float = 2.5e-5
    max_time_s: float = 1.2e-3
    n_average_windows: int = 2
    tolerance: float = 0.01
    mass_tolerance: float = 0.01
    max_time_step_s: float = 5e-8
    sample_interval_s: float = 1e-7
    density_floor_m3: float = 1e13
    electron_temperature_floor_eV: float = 0.5
    electron_temperature_ceiling_eV: float = 250.0
    wall_secondary_yield: float = 0.5
    wall_loss_scale: float = 1.0
    max_floor_fraction: float = 0.02
    ion_scheme_order: int = 2
    warmup_time_s: float = 2.0e-4
    warmup_coarsening: int = 2
    wall_material: str = "boron_nitride"
    wall_transition_gaps: float = 0.25
    ion_neutral_collision_scale: float = 1.0
    time_order: int = 2
    min_oscillation_periods: int = 5
    quiescent_window_fraction: float = 0.25
    energy_bound_tolerance: float = 0.02
    ion_energy_equation: int = 1
    wall_reemission_upstream_fraction: float = 0.0

    def __post_init__(self) -> None:
        validate_dataclass(self, CONSTRAINTS, owner="solver")
        if self.max_time_s < self.min_time_s + self.n_average_windows * self.window_s:
            raise InputDataError(
                f"solver.max_time_s = {self.max_time_s!r} s is shorter than min_time_s + "
                f"n_average_windows * window_s = "
                f"{self.min_time_s + self.n_average_windows * self.window_s!r} s; raise it."
            )
        if self.electron_temperature_floor_eV >= self.electron_temperature_ceiling_eV:
            raise InputDataError(
                "solver.electron_temperature_floor_eV must be below electron_temperature_ceiling_eV."
            )

    def to_dict(self) -> dict[str, float | int | str]:
        """Plain-dict form (same keys as the TOML ``[solver]`` table)."""
        return asdict(self)
