"""The 1-D quasi-neutral fluid discharge model and its time march.

Model
-----
Axial coordinate z from the anode (z = 0) to the cathode plane
(z = ``domain_length_m``), annular cross-section A, uniform cells. Wall terms
act inside the channel and fade out smoothly across the exit plane,
w(z) = (1 - tanh((z - L_ch) / delta)) / 2 with delta =
``wall_transition_gaps`` channel gaps h = r_o - r_i (no step).

Neutrals: anode gas n_n drifting downstream at the mean thermal speed at the
anode temperature u_n = sqrt(8 k T_a / (pi M)), gas re-emitted by the walls
moving upstream n_w at the same speed (the walls taken at the anode
temperature), and ingested background gas n_b drifting upstream at
u_b = sqrt(2 k T_bg / (pi M)) (the mean axial speed of the inward
half-Maxwellian)::

    dn_n/dt + d(n_n u_n)/dz = -n_e n_n k_iz(T_e) + nu_w n_i / 2
    dn_w/dt - d(n_w u_n)/dz = -n_e n_w k_iz(T_e) + nu_w n_i / 2
    dn_b/dt - d(n_b u_b)/dz = -n_e n_b k_iz(T_e)

The ions recombined on the walls are re-emitted diffusely (cosine law) at the
wall temperature, whose axial velocity distribution is symmetric: half move
upstream, half downstream (``wall_reemission_upstream_fraction``). n_n is
fed at the anode by the mass flow, the ions recombining on the anode and the
ingested and wall gas arriving there; n_b enters through the cathode plane
with the free-molecular (Hertz-Knudsen) flux n_bg sqrt(k T_bg / (2 pi M)) per
unit area, n_bg = p_bg / (k T_bg) from ``OperatingPoint.background_pressure_Pa``
and ``background_temperature_K`` (0 Pa = space).

Ions (singly charged, cold, density n_i = n_e, flux n_i u_i, kinetic-energy
density M q_i; each new ion keeps its neutral's velocity u_k, S_k its source)::

    dn_i/dt + d(n_i u_i)/dz = n_e (n_n + n_w + n_b) k_iz - nu_w n_i
    d(n_i u_i)/dt + d(n_i u_i^2)/dz = (e/M) n_i E + sum_k S_k u_k
        - nu_w n_i u_i - nu_in n_i (u_i - u_n)
    dq_i/dt + d(q_i u_i)/dz = (e/M) n_i u_i E + sum_k S_k u_k^2 / 2
        - nu_w q_i - nu_in (q_i - n_i u_n^2 / 2)

The energy equation holds the total kinetic energy of ions born at different
potentials, which a single velocity per cell cannot (momentum sharing would
destroy the difference); in a steady state its flux is exact whatever the
closure of the flux, so it gives the exit ion energy M <n u^3> / (2 e <n u>)
(``ion_energy_equation``); it does not act back on the momentum.

with the wall loss frequency nu_w = w(z) 2 exp(-1/2) c_s / h (Bohm flux at
the pre-sheath density on both walls, c_s = sqrt(e T_e / M)); the ions lost
there recombine and are re-emitted as neutrals. nu_in = (n_n + n_b)
(sigma_cx(E) g + k_L): resonant charge exchange and elastic (Langevin)
momentum transfer, see :mod:`profshape.solver.ion_neutral`. Boundaries: a
Bohm sink with the pre-sheath density factor into the anode, supersonic
outflow at the cathode plane.

Electrons (quasi-neutral, massless; generalized Ohm's law across B)::

    n_e u_e = -mu_perp (n_e E + d(n_e T_e)/dz),
    mu_perp = (e / (m_e nu)) / (1 + (omega_ce/nu)^2),
    nu = nu_en + nu_ei + nu_w / (1 - sigma) + nu_anom

with nu_en = (n_n + n_b) k_en, nu_ei from the NRL Plasma Formulary, nu_anom
from the anomalous profile and nu_w / (1 - sigma) the rate at which primary
electrons reach the walls (secondary yield sigma). Current continuity makes
j = e n (u_i - u_e) uniform in z; integrating E from the anode sheath edge
(potential V_d + Delta) to the cathode plane (potential 0) gives j, hence
I_d = j A, and E(z).

Anode sheath: the fall Delta = T_e ln(Gamma_th / Gamma_req) between the
plasma at the sheath edge and the anode lets through the electron flux the
plasma needs, Gamma_req, out of the random flux Gamma_th = n_e v_e / 4
(electron-repelling for Delta > 0); it is bounded by the floating value
T_e ln sqrt(M / (2 pi m_e)) above and by -T_e below, and relaxes towards its
target over 0.2 us.

Electron energy (T_e in eV)::

    d(3/2 n_e T_e)/dt + d/dz(5/2 n_e u_e T_e - kappa dT_e/dz)
        = -n_e u_e E - n_e (n_n + n_b)(k_iz E_iz + k_ex E_ex) - W_wall

with kappa = 5/2 n_e T_e mu_perp. The wall loss follows the floating sheath
with secondary emission of Hobbs and Wesson (Plasma Physics 9, 85, 1967):
each primary electron removes 2 T_e + (1 - sigma) phi_s, phi_s = T_e
ln((1 - sigma) sqrt(M / (2 pi m_e))), with sigma(T_e) the yield of the wall
material capped at the space-charge-saturated value (see
:mod:`profshape.solver.walls`). At the cathode plane T_e equals
``Device.cathode_electron_temperature_eV`` (half a cell beyond the last cell
centre); at the anode the conductive heat flux is zero and electrons leave
with 2 T_e + Delta each (5/2 T_e for a negative fall).

Numerics
--------
Finite volumes on a uniform grid. Ions: Rusanov fluxes with a linear
reconstruction of density and velocity limited by van Leer's harmonic limiter
(``ion_scheme_order=1`` gives first order); neutrals: upwind fluxes with the
same reconstruction. Ions and neutrals advance with SSP-RK2 (Shu and Osher
1988; ``time_order=1``: forward Euler) with E, rates and T_e frozen over the
step; the time step is the smaller of a Courant number on ``|u_i| + c_s`` and the
same number on the ion acceleration time ``sqrt(dz M / (e |E|))``. Electron
energy: backward Euler in T_e (one tridiagonal solve per step) with
convection central where the cell Peclet number is below 2 and upwind beyond
(hybrid scheme), the wall power linearised in T_e (Newton). The Coulomb
logarithm is refreshed every 8 steps, the ion-neutral drag every 4. A run
whose ion speed exceeds twice the energy bound plus 20 km/s is stopped
("failed"). The start-up transient is marched on a coarser grid
(``warmup_time_s``), then interpolated onto the solver grid.

Acceptance: after ``min_time_s`` the run is split into windows; it stops
when the last ``n_average_windows`` windows agree in discharge current and
exit ion velocity within ``tolerance`` and the heavy-particle balance closes
within ``mass_tolerance``. A quiescent discharge (current rms below 1 %) is
tested on windows of ``quiescent_window_fraction`` times ``window_s`` with the
tolerance scaled by the same fraction (the same bound on the drift rate). An
oscillating discharge is averaged over whole cycles; its tolerance widens with
the cycle-to-cycle scatter by at most 2x, and it is accepted only once the
averaging range holds ``min_oscillation_periods`` periods (status
"oscillating", with rms, peak-to-peak amplitude and dominant frequency). A
converged run whose potential rises above V_d + Delta by more than
``energy_bound_tolerance`` V_d plus a pre-sheath of 2 T_e (anode), whose ions
exceed sqrt(2 e phi_max / M) by that margin, or whose exit ion energy exceeds
V_d + Delta by it, is "failed" with the reason (cells kept); so is a run whose
discharge went out (mass utilization below 1 % or an anode efficiency above 1).
Balances are accumulated independently: ions created (volume integral) against
ions leaving through the anode, the cathode plane and the walls; the time-averaged
ion continuity per cell from face fluxes and sources; the ion momentum (outflow
against electric force, ionization, wall and ion-neutral terms). The thrust
keeps the momentum that charge exchange hands to fast downstream neutrals.
"""

from __future__ import annotations

import itertools
import math
import time

import numpy as np
import numpy.typing as npt
import pandas as pd
from scipy import constants

from ..exceptions import InputDataError
from ..operating_point import OperatingPoint
from ..profile import AnomalousProfile, electron_gyrofrequency
from ..propellants import Propellant
from . import _kernels
from .device import Device
from .ion_neutral import CHARGE_EXCHANGE_FITS, langevin_rate
from .magnetic import TabulatedField
from .rates import RateSet, _supported, rate_set
from .results import SolverResult, SolverStatus
from .settings import SolverSettings
from .walls import PRESHEATH_DENSITY_FACTOR, secondary_yield

__all__ = ["grid", "solve"]

_STATUS_TEXT = {
    _kernels.NONFINITE_CURRENT: "discharge current",
    _kernels.NONFINITE_TEMPERATURE: "electron temperature",
    _kernels.NONFINITE_DENSITY: "plasma density",
    _kernels.NONFINITE_ION_FLUX: "ion flux",
    _kernels.TIME_STEP_COLLAPSE: "time step (collapsed below 1e-13 s)",
    _kernels.VELOCITY_RUNAWAY: "ion speed (numerical instability: |u_i| + c_s exceeded twice the "
    "energy bound sqrt(2 e V_d / M) plus 20 km/s)",
}


def grid(device: Device, settings: SolverSettings | None = None) -> np.ndarray:
    """Cell centres of the solver grid [m] from the anode, shape (n_cells,).

    Parameters
    ----------
    device : Device
        Sets the domain length.
    settings : SolverSettings, optional
        Sets ``n_cells`` (default settings if omitted).
    """
    settings = SolverSettings() if settings is None else settings
    dz = device.domain_length_m / settings.n_cells
    return (np.arange(settings.n_cells) + 0.5) * dz


def _check_inputs(device: object, point: object, profile: object, settings: object) -> None:
    if not isinstance(device, Device):
        raise InputDataError(f"device must be a profshape.solver.Device; got {type(device).__name__}.")
    if not isinstance(point, OperatingPoint):
        raise InputDataError(
            f"point must be a profshape.OperatingPoint; got {type(point).__name__}."
        )
    if not isinstance(profile, AnomalousProfile):
        raise InputDataError(
            f"profile must be a profshape.AnomalousProfile; got {type(profile).__name__}."
        )
    if not isinstance(settings, SolverSettings):
        raise InputDataError(
            f"settings must be a SolverSettings; got {type(settings).__name__}."
        )


def _failed(
    reason: str, z: np.ndarray | None, t0: float, extra: dict[str, float | bool | str] | None = None
) -> SolverResult:
    g: dict[str, float | bool | str] = {
        "status": "failed",
        "converged": False,
        "reason": reason,
        "wall_time_s": time.perf_counter() - t0,
    }
    if extra:
        g.update(extra)
    cells = pd.DataFrame({"z_m": z}) if z is not None else pd.DataFrame()
    return SolverResult("failed", reason, cells, g)


def _initial_state(
    z: np.ndarray, device: Device, gamma_in: float, u_n: float, v_max: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    lch = device.channel_length_m
    s = 0.5 * (1.0 + np.tanh((z - 0.8 * lch) / (0.15 * lch)))
    nn = gamma_in / u_n * (1.0 - 0.9 * s)
    ni = 2e17 + 6e17 * np.exp(-(((z - 0.8 * lch) / (0.4 * lch)) ** 2))
    ui = -1500.0 + (0.8 * v_max + 1500.0) * s
    te = 4.0 + 16.0 * np.exp(-(((z - lch) / (0.3 * lch)) ** 2))
    return nn, ni, ni * ui, te


def solve(
    device: Device,
    point: OperatingPoint,
    profile: AnomalousProfile,
    settings: SolverSettings | None = None,
) -> SolverResult:
    """Solve the discharge for one operating point and anomalous profile.

    Parameters
    ----------
    device : Device
        Geometry, magnetic field and boundary temperatures.
    point : OperatingPoint
        Discharge voltage [V], anode mass flow [kg/s], propellant, field scale.
    profile : AnomalousProfile
        Anomalous collision frequency profile along z [m from the anode].
    settings : SolverSettings, optional
        Grid and time-march settings (defaults if omitted).

    Returns
    -------
    SolverResult
        Status ``"ok"`` (converged; all outputs finite), ``"not_converged"``
        (finite averages, convergence test failed) or ``"failed"`` (diverged,
        or the profile gave unusable values), with a reason.

    Raises
    ------
    InputDataError
        For invalid configuration only (wrong types, unsupported propellant,
        a tabulated field that does not span the grid). A valid configuration
        never raises.
    """
    t0 = time.perf_counter()
    settings = SolverSettings() if settings is None else settings
    _check_inputs(device, point, profile, settings)
    prop = _supported(point.propellant)
    z = grid(device, settings)
    field = device.magnetic_field
    if isinstance(field, TabulatedField) and not field.covers(
        np.array([0.0, device.domain_length_m])
    ):
        raise InputDataError(
            f"device.magnetic_field.z_m spans [{field.z_m[0]!r}, {field.z_m[-1]!r}] m but the "
            f"solver grid spans [0, {device.domain_length_m!r}] m; give B_T from the anode "
            "to the cathode plane."
        )
    b = np.asarray(field(z), dtype=float) * point.magnetic_field_scale
    try:
        return _solve(device, point, profile, settings, prop, z, b, t0)
    except Exception as exc:  # a valid configuration never raises: report instead
        return _failed(f"internal error: {type(exc).__name__}: {exc}", z, t0)


def _anomalous(
    profile: AnomalousProfile, z: np.ndarray, b: np.ndarray
) -> tuple[npt.NDArray[np.float64] | None, str]:
    """Anomalous frequency on z, or (None, reason) if the profile is unusable."""
    n = z.size
    try:
        nu = np.asarray(profile.frequency(z, b), dtype=float)
    except Exception as exc:
        return None, f"the anomalous profile raised {type(exc).__name__}: {exc}"
    if nu.shape != (n,):
        if nu.size != 1:
            return None, f"the anomalous profile returned shape {nu.shape}, expected ({n},)"
        nu = np.full(n, float(nu.ravel()[0]))
    if not np.all(np.isfinite(nu)) or np.any(nu < 0.0):
        bad = int(np.flatnonzero(~np.isfinite(nu) | (nu < 0.0))[0])
        return None, (
            f"the anomalous profile is negative or non-finite at z = {z[bad]:.4g} m "
            f"({nu[bad]!r} 1/s)"
        )
    return np.ascontiguousarray(nu), ""


class _Case:
    """Everything the kernel needs on one grid."""

    def __init__(
        self,
        device: Device,
        point: OperatingPoint,
        profile: AnomalousProfile,
        settings: SolverSettings,
        prop: Propellant,
        n: int,
    ) -> None:
        sets = settings
        self.settings = sets
        self.device = device
        self.n = n
        self.dz = device.domain_length_m / n
        self.z = (np.arange(n) + 0.5) * self.dz
        self.b = np.asarray(device.magnetic_field(self.z), dtype=float) * point.magnetic_field_scale
        self.nu_anom, self.problem = _anomalous(profile, self.z, self.b)
        self.mass = prop.mass_kg
        self.area = device.channel_area_m2
        self.v_d = point.discharge_voltage_V
        k_b = constants.k
        self.u_n = math.sqrt(8.0 * k_b * device.anode_temperature_K / (math.pi * self.mass))
        self.gamma_in = point.anode_mass_flow_kg_s / (self.mass * self.area)
        # background gas: one-sided free-molecular flux n sqrt(kT / (2 pi M)) into the
        # cathode plane; the inward half-Maxwellian drifts at sqrt(2 k T / (pi M))
        t_bg = point.background_temperature_K
        self.gamma_bg = point.background_density_m3 * math.sqrt(
            k_b * t_bg / (2.0 * math.pi * self.mass)
        )
        self.u_b = math.sqrt(2.0 * k_b * t_bg / (math.pi * self.mass))
        self.v_max = prop.max_ion_velocity(self.v_d)
        self.omega_ce = np.ascontiguousarray(electron_gyrofrequency(self.b))
        gap = device.channel_width_m
        width = sets.wall_transition_gaps * gap
        self.wall_frac = np.ascontiguousarray(
            0.5 * (1.0 - np.tanh((self.z - device.channel_length_m) / width))
        )
        self.wall_rate_factor = sets.wall_loss_scale * 2.0 * PRESHEATH_DENSITY_FACTOR / gap
        self.sheath_log_ratio = math.log(math.sqrt(self.mass / (2.0 * math.pi * constants.m_e)))
        self.rates = rate_set(prop.name)
        self.wall_tables = _wall_tables(sets.wall_material, sets.wall_secondary_yield,
                                        prop.ion_mass_kg, self.mass, self.rates)  # fmt: skip
        scale = sets.ion_neutral_collision_scale
        self.cex_a, self.cex_b = (scale * c for c in CHARGE_EXCHANGE_FITS[prop.name])
        self.k_elastic = scale * langevin_rate(prop)
        self.hit_kinds = np.zeros(3, dtype=np.int64)

    def initial_state(self) -> list[npt.NDArray[np.float64]]:
        nn, ni, gi, te = _initial_state(self.z, self.device, self.gamma_in, self.u_n, self.v_max)
        nb = np.full(self.n, self.gamma_bg / self.u_b if self.gamma_bg > 0.0 else 0.0)
        qi = 0.5 * gi * gi / ni  # cold ions at the start
        return [nn, nb, np.zeros(self.n), ni, gi, qi, te, np.zeros(1)]

    def march(
        self,
        state: list[npt.NDArray[np.float64]],
        t: float,
        t_end: float,
        chunk_dt: float,
        acc: npt.NDArray[np.float64],
        acc_g: npt.NDArray[np.float64],
        samples: npt.NDArray[np.float64],
    ) -> tuple[int, int, float, int, int, int]:
        """March ``state`` (modified in place) from t to t_end; see :func:`_kernels.march`."""
        if self.nu_anom is None:
            raise RuntimeError(f"march called on a case with an unusable profile: {self.problem}")
        sets, r = self.settings, self.rates
        nn, nb, nw, ni, gi, qi, te, sheath = state
        return _kernels.march(
            nn, nb, nw, ni, gi, qi, te, sheath, self.dz, self.area, self.mass, self.u_n,
            self.u_b, sets.wall_reemission_upstream_fraction,
            self.gamma_in, self.gamma_bg, self.v_d, self.device.cathode_electron_temperature_eV,
            self.omega_ce, self.nu_anom, self.wall_frac, self.wall_rate_factor,
            *self.wall_tables,
            r.t0_eV, 1.0 / r.dt_eV, r.ionization_m3_s, r.energy_loss_eV_m3_s, r.momentum_m3_s,
            self.cex_a, self.cex_b, self.k_elastic, self.u_n,
            sets.density_floor_m3, sets.electron_temperature_floor_eV,
            sets.electron_temperature_ceiling_eV, sets.cfl, sets.max_time_step_s,
            sets.ion_scheme_order == 2, sets.time_order == 2, sets.ion_energy_equation == 1,
            2.0 * self.v_max + 2e4,
            _ANODE_FALL_MIN_TE, self.sheath_log_ratio, _ANODE_FALL_TIME_S,
            t, t_end, sets.sample_interval_s, chunk_dt, acc, acc_g, samples, self.hit_kinds,
        )  # fmt: skip


#: Most negative anode fall (electron-attracting sheath) in units of T_e at the anode;
#: beyond about one T_e the electron flux saturates (common practice, no source).
_ANODE_FALL_MIN_TE = -1.0
#: Relaxation time of the anode fall towards its current-balance value [s]
#: (numerical; much shorter than the transit and breathing times).
_ANODE_FALL_TIME_S = 2e-7


def _wall_tables(
    material: str, constant_yield: float, ion_mass: float, mass: float, rates: RateSet
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    """Wall terms tabulated on the rate tables' T_e grid (per unit wall_frac * rate factor).

    Returns 1 / (1 - sigma), the wall power per electron
    P(T) = sqrt(e T / M) T (2 / (1 - sigma) + ln((1 - sigma) sqrt(M / (2 pi m_e))))
    [eV/s per unit rate factor] and dP/dT, with sigma(T_e) the capped yield of
    :func:`profshape.solver.walls.secondary_yield`.
    """
    n_tab = rates.ionization_m3_s.size
    t = np.maximum(rates.t0_eV + rates.dt_eV * np.arange(n_tab), 1e-3)
    sigma = np.minimum(secondary_yield(material, t, ion_mass, constant_yield), 0.98)
    log_ratio = math.log(math.sqrt(mass / (2.0 * math.pi * constants.m_e)))
    inv1m = 1.0 / (1.0 - sigma)
    per = 2.0 * inv1m + np.maximum(log_ratio + np.log(1.0 - sigma), 0.0)
    power = np.sqrt(constants.e * t / mass) * t * per  # the kernel's c_s uses the atom mass
    slope = np.gradient(power, t)
    return np.ascontiguousarray(inv1m), np.ascontiguousarray(power), np.ascontiguousarray(slope)


def _new_acc(n_chunks: int, n: int) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    return np.zeros((n_chunks, _kernels.N_CELL_FIELDS, n)), np.zeros((n_chunks, _kernels.N_GLOBALS))


def _warm_start(
    device: Device,
    point: OperatingPoint,
    profile: AnomalousProfile,
    settings: SolverSettings,
    prop: Propellant,
    fine: _Case,
) -> list[npt.NDArray[np.float64]] | None:
    """March a coarser grid through the start-up transient; state on the fine grid or None."""
    n_coarse = fine.n // settings.warmup_coarsening
    if settings.warmup_coarsening == 1 or settings.warmup_time_s <= 0.0 or n_coarse < 20:
        return None
    coarse = _Case(device, point, profile, settings, prop, n_coarse)
    if coarse.nu_anom is None:
        return None
    state = coarse.initial_state()
    acc, acc_g = _new_acc(1, n_coarse)
    status = coarse.march(state, 0.0, settings.warmup_time_s, 1.0, acc, acc_g, np.zeros(1))[0]
    if status != _kernels.OK or not all(np.all(np.isfinite(x)) for x in state):
        return None
    out = [np.ascontiguousarray(np.interp(fine.z, coarse.z, x)) for x in state[:7]]
    return [*out, state[7].copy()]


def _solve(
    device: Device,
    point: OperatingPoint,
    profile: AnomalousProfile,
    settings: SolverSettings,
    prop: Propellant,
    z: np.ndarray,
    b: np.ndarray,
    t0: float,
) -> SolverResult:
    case = _Case(device, point, profile, settings, prop, z.size)
    if case.nu_anom is None:
        return _failed(case.problem, z, t0)
    n = case.n
    state = _warm_start(device, point, profile, settings, prop, case)
    warm = state is not None
    if state is None:
        state = case.initial_state()
    plan = _Plan(settings)
    acc, acc_g = _new_acc(plan.n_chunks, n)
    samples = np.zeros(plan.n_samples)
    t = 0.0
    c0 = 0
    steps_total = 0
    converged = False
    reason = "no averaging window completed"
    span = None
    while c0 < plan.n_chunks_run:
        c1 = min(c0 + plan.chunks_per_call, plan.n_chunks_run)
        t_end = c1 * plan.chunk_dt
        s0 = round(t / settings.sample_interval_s)
        status, steps, t_new, hits, _n_samp, bad = case.march(
            state, t, t_end, plan.chunk_dt, acc[c0:c1], acc_g[c0:c1], samples[s0:]
        )
        steps_total += steps
        if status != _kernels.OK:
            what = _STATUS_TEXT.get(status, f"status {status}")
            verb = "ran away" if status == _kernels.VELOCITY_RUNAWAY else "diverged (non-finite)"
            return _failed(
                f"{what} {verb} at t = {t_new:.4g} s, step {steps_total}, "
                f"near z = {z[bad]:.4g} m",
                z,
                t0,
                {"simulated_time_s": t_new, "n_steps": steps_total},
            )
        plan.hits[c0:c1] = hits / (c1 - c0)  # spread evenly over the call's chunks
        plan.kinds[c0:c1] = (case.hit_kinds - plan.kinds_total) / (c1 - c0)
        plan.kinds_total = case.hit_kinds.copy()
        plan.steps[c0:c1] = steps / (c1 - c0)
        t = t_end
        c0 = c1
        found, ok, reason = _convergence(acc, acc_g, samples, c1, plan, settings)
        if found is not None:
            span = found
            if ok:
                converged = True
                break
    if not converged:
        reason = f"time limit {settings.max_time_s:.3g} s reached: {reason}"
    if span is None:
        span = (max(c0 - settings.n_average_windows * plan.chunks_per_window, 0), c0, 0, 0.0)
    result = _assemble(
        acc, acc_g, samples, span, plan, converged, reason, device, point, prop, z, case,
        settings, t, steps_total, t0,
    )  # fmt: skip
    result.globals["warm_start"] = warm
    return result


class _Plan:
    """Chunking of the simulated time for averaging and convergence checks."""

    def __init__(self, settings: SolverSettings) -> None:
        self.chunks_per_window = max(8, round(settings.window_s / 2e-6))
        self.chunk_dt = settings.window_s / self.chunks_per_window
        self.chunks_per_short = max(
            2, round(settings.quiescent_window_fraction * self.chunks_per_window)
        )
        self.chunks_per_call = max(1, self.chunks_per_short // 2)
        self.n_chunks_run = math.ceil(settings.max_time_s / self.chunk_dt - 1e-9)
        self.n_chunks = self.n_chunks_run + 1
        self.min_chunk = round(settings.min_time_s / self.chunk_dt)
        self.n_samples = int(settings.max_time_s / settings.sample_interval_s) + 8
        self.hits = np.zeros(self.n_chunks)
        self.kinds = np.zeros((self.n_chunks, 3))
        self.kinds_total = np.zeros(3, dtype=np.int64)
        self.steps = np.zeros(self.n_chunks)


#: Relative standard deviation of the discharge current above which the
#: discharge counts as oscillating (status "oscillating"; averages over whole
#: cycles when the chunk means themselves oscillate).
_OSCILLATION_THRESHOLD = 0.01
#: Largest factor by which the statistical allowance may widen the tolerance.
_MAX_ALLOWANCE = 2.0
#: Rise of the potential above the anode sheath edge allowed for the pre-sheath [T_e].
_PRESHEATH_RISE_TE = 2.0
#: Mass utilization below which the discharge counts as gone out (a self-sustained
#: discharge ionizes far more than 1 % of its flow; common practice, no source).
_EXTINCT_MASS_UTILIZATION = 0.01


def _upward_crossings(x: np.ndarray, band: float) -> np.ndarray:
    """Indices where x rises through +band after having been below -band."""
    out = []
    armed = False
    for i, v in enumerate(x):
        if v < -band:
            armed = True
        elif v > band and armed:
            out.append(i)
            armed = False
    return np.asarray(out, dtype=int)


def _sample_slice(plan: _Plan, settings: SolverSettings, a: int, b: int) -> slice:
    dts = settings.sample_interval_s
    return slice(math.ceil(a * plan.chunk_dt / dts - 1e-9), int(b * plan.chunk_dt / dts))


def _periods(samples: np.ndarray, dt: float) -> tuple[float, float, float, float]:
    """(rms [A], peak-to-peak [A], dominant frequency [Hz], whole periods) of a history."""
    if samples.size < 8:
        return 0.0, 0.0, 0.0, 0.0
    std = float(samples.std())
    p2p = float(samples.max() - samples.min())
    if std <= _OSCILLATION_THRESHOLD * abs(float(samples.mean())):
        return std, p2p, 0.0, 0.0
    x = samples - samples.mean()
    crossings = _upward_crossings(x, 0.25 * std)
    n_fft = 8 * int(2 ** math.ceil(math.log2(x.size)))
    spec = np.abs(np.fft.rfft(x * np.hanning(x.size), n=n_fft))
    freqs = np.fft.rfftfreq(n_fft, d=dt)
    spec[freqs < 1.0 / (x.size * dt)] = 0.0  # ignore components slower than the history
    freq = float(freqs[int(np.argmax(spec))])
    return std, p2p, freq, float(max(crossings.size - 1, 0))


def _spans(
    acc_g: np.ndarray, samples: np.ndarray, c_end: int, plan: _Plan, settings: SolverSettings
) -> tuple[list[int] | None, list[int] | None, int, float, str]:
    """The last n_average_windows + 1 spans ending at c_end, as chunk boundaries.

    Returns (bounds, cycle_bounds, n_cycles_per_span, scale, message); bounds
    is None if there is not enough data yet. ``scale`` multiplies the
    tolerance (the quiescent fast path compares shorter windows against a
    proportionally smaller tolerance: the same bound on the drift rate).
    """
    k = settings.n_average_windows
    npw = plan.chunks_per_window
    lo = plan.min_chunk
    if c_end - lo < min(npw, (k + 1) * plan.chunks_per_short):
        return None, None, 0, 1.0, "transient not yet over"
    g = acc_g[lo:c_end]
    cur = g[:, _kernels.G_CUR] / np.maximum(g[:, _kernels.G_T], 1e-300)
    recent = cur[-npw:]
    mean = float(np.mean(recent))
    rel = float(np.std(recent)) / max(abs(mean), 1e-30)
    if rel <= _OSCILLATION_THRESHOLD:
        window = samples[_sample_slice(plan, settings, c_end - npw, c_end)]
        p2p = float(window.max() - window.min()) / max(abs(mean), 1e-30) if window.size else 0.0
        if p2p <= 4.0 * _OSCILLATION_THRESHOLD:  # quiescent: short windows (fast path)
            w, scale = plan.chunks_per_short, plan.chunks_per_short / npw
        else:  # fast oscillation inside the chunks: whole windows, periods counted later
            w, scale = npw, 1.0
        if c_end - (k + 1) * w < lo:
            return None, None, 0, 1.0, "transient not yet over"
        return [c_end - j * w for j in range(k + 1, -1, -1)], None, 0, scale, ""
    crossings = _upward_crossings(cur - mean, 0.25 * rel * abs(mean)) + lo
    if crossings.size < 3:
        return None, None, 0, 1.0, f"oscillating ({rel:.1%} rms), too few cycles yet"
    period = float(np.median(np.diff(crossings[-6:])))
    # at least one window per span and enough cycles for min_oscillation_periods over the
    # averaged spans; longer spans (the later half of the cycles seen) as the run goes on
    m = max(1, round(npw / period), math.ceil(settings.min_oscillation_periods / k),
            (crossings.size - 1) // (2 * (k + 1)))  # fmt: skip
    need = (k + 1) * m + 1
    if crossings.size < need:
        return None, None, m, 1.0, (
            f"oscillating ({rel:.1%} rms), {crossings.size} of {need} cycles"
        )
    cycle_bounds = [int(x) for x in crossings[-need:]]
    return cycle_bounds[::m], cycle_bounds, m, 1.0, ""


def _convergence(
    acc: np.ndarray,
    acc_g: np.ndarray,
    samples: np.ndarray,
    c_end: int,
    plan: _Plan,
    settings: SolverSettings,
) -> tuple[tuple[int, int, int, float] | None, bool, str]:
    """Convergence test at chunk c_end; returns (span or None, ok, reason).

    span = (first chunk, end chunk, cycles, relative statistical uncertainty)
    of the averaging range. Consecutive spans must agree within the tolerance;
    for an oscillating discharge the tolerance widens to twice the standard
    error of the span difference estimated from the cycle-to-cycle scatter,
    at most two-fold. An oscillating discharge is accepted only once the
    averaging range holds ``min_oscillation_periods`` periods.
    """
    bounds, cycles, m, scale, msg = _spans(acc_g, samples, c_end, plan, settings)
    if bounds is None:
        return None, False, msg
    k = settings.n_average_windows
    tol = settings.tolerance * scale
    G = _kernels

    def means(a: int, b: int) -> tuple[float, float]:
        g = acc_g[a:b].sum(axis=0)
        u_exit = acc[a:b, G.A_GI, -1].sum() / max(acc[a:b, G.A_NE, -1].sum(), 1e-300)
        return g[G.G_CUR] / g[G.G_T], u_exit

    stats = [means(a, b) for a, b in itertools.pairwise(bounds)]
    uncertainty = 0.0
    allowance = tol
    if cycles is not None and m * k >= 2:
        per_cycle = np.array([means(a, b) for a, b in itertools.pairwise(cycles[m:])])
        sc = np.maximum(np.abs(per_cycle.mean(axis=0)), 1e-30)
        scatter = per_cycle.std(axis=0, ddof=1) / sc  # relative, per cycle
        uncertainty = float(np.max(scatter) / math.sqrt(m * k))
        span_diff_se = float(np.max(scatter)) * math.sqrt(2.0 / m)
        allowance = min(max(tol, 2.0 * span_diff_se), _MAX_ALLOWANCE * tol)
    worst = 0.0
    what = ""
    for (c0, u0), (c1, u1) in itertools.pairwise(stats):
        for name, x, y in (("discharge current", c0, c1), ("exit ion velocity", u0, u1)):
            if not (math.isfinite(x) and math.isfinite(y)):
                return None, False, f"{name} not finite"
            rel = abs(y - x) / max(abs(x), abs(y), 1e-30)
            if rel > worst:
                worst, what = rel, name
    g = acc_g[bounds[1] : bounds[-1]].sum(axis=0)
    mass_err = (g[G.G_ION_OUT] + g[G.G_NEU_OUT]) / g[G.G_IN] - 1.0
    mass_allowance = settings.mass_tolerance * allowance / settings.tolerance
    span = (bounds[1], bounds[-1], m * k, uncertainty)
    unit = f"spans of {m} oscillation cycles" if m else "windows"
    if worst > allowance:
        return span, False, (
            f"{what} changed by {worst:.2%} between {unit} (tolerance {allowance:.2%})"
        )
    if abs(mass_err) > mass_allowance:
        return span, False, (
            f"heavy-particle balance off by {mass_err:.2%} (tolerance {mass_allowance:.2%})"
        )
    hist = samples[_sample_slice(plan, settings, bounds[1], bounds[-1])]
    std, _p2p, _freq, n_per = _periods(hist, settings.sample_interval_s)
    if cycles is None and std > _OSCILLATION_THRESHOLD * abs(stats[-1][0]):
        if n_per < settings.min_oscillation_periods:
            return span, False, (
                f"oscillating ({std / abs(stats[-1][0]):.1%} rms), {n_per:.0f} of "
                f"{settings.min_oscillation_periods} periods in the averaging range"
            )
    return span, True, (
        f"{unit} agree within {worst:.2%} (tolerance {allowance:.2%}); mass balance closes "
        f"within {abs(mass_err):.2%}"
    )


def _assemble(
    acc_all: np.ndarray, g_all: np.ndarray, samples_all: np.ndarray,
    span: tuple[int, int, int, float], plan: _Plan, converged: bool, reason: str,
    device: Device, point: OperatingPoint, prop: Propellant, z: np.ndarray, case: _Case,
    settings: SolverSettings, t_sim: float, steps: int, t0: float,
) -> SolverResult:  # fmt: skip
    e = constants.e
    G = _kernels
    n = z.size
    area, mass, u_n = case.area, case.mass, case.u_n
    a, bnd, n_cycles, uncertainty = span
    acc = acc_all[a:bnd].sum(axis=0)
    g = g_all[a:bnd].sum(axis=0)
    tw = g[G.G_T]
    t_a, t_b = a * plan.chunk_dt, bnd * plan.chunk_dt
    dts = settings.sample_interval_s
    samples = samples_all[_sample_slice(plan, settings, a, bnd)]
    hits = float(plan.hits[a:bnd].sum())
    steps_avg = float(plan.steps[a:bnd].sum())
    ne = acc[G.A_NE] / tw
    ui = acc[G.A_GI] / acc[G.A_NE]
    current = g[G.G_CUR] / tw
    face_flux = acc[G.A_FN] / tw  # ion flux at the anode-side face of each cell
    ion_current = e * area * acc[G.A_GI] / tw
    electron_current = current - ion_current  # quasi-neutral current continuity
    phi = acc[G.A_PHI] / tw
    te = acc[G.A_TE] / tw
    cells = pd.DataFrame(
        {
            "z_m": z,
            "ion_velocity_m_s": ui,
            "plasma_density_m3": ne,
            "neutral_density_m3": acc[G.A_NN] / tw,
            "electron_temperature_eV": te,
            "potential_V": phi,
            "electric_field_V_m": acc[G.A_EF] / tw,
            "anomalous_frequency_per_s": case.nu_anom,
            "magnetic_field_T": case.b,
            "collision_frequency_per_s": acc[G.A_NU] / tw,
            "ion_current_A": ion_current,
            "electron_current_A": electron_current,
            "wall_secondary_yield": acc[G.A_SEE] / tw,
            "ion_mean_energy_eV": acc[G.A_EI] / np.maximum(acc[G.A_NE], 1e-300),
        }
    )
    mdot = point.anode_mass_flow_kg_s
    v_d = point.discharge_voltage_V
    ion_out = g[G.G_ION_OUT] / tw
    mom_out = g[G.G_MOM_OUT] / tw
    neutral_out = g[G.G_NEU_OUT] / tw
    # resonant charge exchange hands the ion's momentum to a fast neutral that keeps the
    # ion's velocity (Rapp and Francis 1962) and leaves with the propellant: it stays thrust
    cx_mom = g[G.G_CX_MOM] / tw
    thrust = mass * area * (mom_out + u_n * neutral_out + cx_mom)
    # independent ion-momentum balance: outflow - anode inflow = electric force + momentum
    # of the newly born ions - momentum into the walls - ion-neutral drag
    mom_sources = (g[G.G_EFORCE] + g[G.G_IZ_MOM] - g[G.G_WALL_MOM] - g[G.G_DRAG_MOM]) / tw
    mom_flow = mom_out - g[G.G_ANODE_MOM] / tw
    mom_err = mom_flow / mom_sources - 1.0 if mom_sources > 0.0 else 0.0
    v_eff = mom_out / ion_out if ion_out > 0.0 else 0.0
    exit_energy = (
        0.5 * prop.ion_mass_kg * (g[G.G_ENERGY_OUT] / g[G.G_ION_OUT]) / e if ion_out > 0 else 0.0
    )
    beam = e * area * ion_out
    power = v_d * current
    std, p2p, freq, n_per = _periods(samples, dts)
    if n_cycles:
        freq = n_cycles / (t_b - t_a)
        n_per = float(n_cycles)
    g_in = g[G.G_IN] / tw
    mass_err = (ion_out + neutral_out) / g_in - 1.0
    # independent balances: ions created = ions leaving through the two ends and the walls
    ion_made = g[G.G_IONIZATION] / tw
    ion_lost = ion_out - g[G.G_ION_ANODE] / tw + g[G.G_WALL] / tw
    ion_err = ion_lost / ion_made - 1.0 if ion_made > 0 else 0.0
    # local time-averaged ion continuity from face fluxes and sources, per cell
    face = np.append(face_flux, ion_out)
    resid = np.diff(face) / case.dz - acc[G.A_SRC] / tw
    if a >= 1:  # storage term: density change over the averaging range
        resid = resid + (acc_all[bnd - 1, G.A_NI_END] - acc_all[a - 1, G.A_NI_END]) / tw
    continuity = float(np.max(np.abs(resid)) * device.domain_length_m / max(ion_out, 1e-30))
    floor_fraction = hits / max(steps_avg * n, 1)
    sheath = g[G.G_SHEATH] / tw
    phi_max = float(np.max(phi))
    u_peak = float(np.max(ui))
    u_bound = math.sqrt(2.0 * e * max(v_d + max(sheath, 0.0), phi_max) / prop.ion_mass_kg)
    glob: dict[str, float | bool | str] = {
        "discharge_current_A": current,
        "discharge_power_W": power,
        "thrust_N": thrust,
        "specific_impulse_s": thrust / (mdot * constants.g),
        "anode_efficiency": thrust**2 / (2.0 * mdot * power),
        "mass_utilization": mass * area * ion_out / mdot,
        "current_utilization": beam / current,
        "voltage_utilization": exit_energy / v_d,
        "exit_ion_energy_eV": exit_energy,
        "exit_ion_velocity_m_s": float(ui[-1]),
        "effective_exit_velocity_m_s": float(v_eff),
        "channel_exit_ion_velocity_m_s": float(np.interp(device.channel_length_m, z, ui)),
        "max_ion_velocity_m_s": u_peak,
        "ion_energy_bound_velocity_m_s": u_bound,
        "beam_current_A": beam,
        "anode_ion_current_A": float(-e * area * g[G.G_ION_ANODE] / tw),
        "wall_ion_current_A": float(e * area * g[G.G_WALL] / tw),
        "anode_fall_V": float(sheath),
        "charge_exchange_thrust_N": float(mass * area * cx_mom),
        "ion_birth_potential_V": float(g[G.G_BIRTH_PHI] / g[G.G_IONIZATION])
        if g[G.G_IONIZATION] > 0.0 else 0.0,
        "ion_momentum_balance_error": float(mom_err),
        "max_potential_V": phi_max,
        "peak_electron_temperature_eV": float(np.max(te)),
        "ingested_mass_flow_kg_s": float(mass * area * g[G.G_INGEST] / tw),
        "oscillation_amplitude_A": std,
        "oscillation_relative_amplitude": std / abs(current),
        "oscillation_peak_to_peak_A": p2p,
        "oscillation_frequency_Hz": freq,
        "oscillation_periods": float(n_per),
        "mass_balance_error": float(mass_err),
        "ion_balance_error": float(ion_err),
        "continuity_residual": continuity,
        "statistical_uncertainty": float(uncertainty),
        "floor_fraction": float(floor_fraction),
        "simulated_time_s": float(t_sim),
        "averaging_time_s": float(tw),
        "averaging_start_s": float(t_a),
        "n_steps": int(steps),
        "n_cells": int(n),
    }
    numeric = {k: v for k, v in glob.items() if isinstance(v, float)}
    bad_glob = [k for k, v in numeric.items() if not math.isfinite(v)]
    bad_cols = [c for c in cells.columns if not np.all(np.isfinite(cells[c].to_numpy()))]
    if bad_glob or bad_cols:
        return _failed(f"non-finite averages in {bad_glob + bad_cols}", z, t0)
    status: SolverStatus = "ok" if converged else "not_converged"
    if converged and std > _OSCILLATION_THRESHOLD * abs(current):
        status = "oscillating"
        reason = (
            f"oscillating: {std / abs(current):.1%} rms, {p2p:.3g} A peak to peak, "
            f"{freq:.3g} Hz, averaged over {n_per:.0f} periods; {reason}"
        )
    if converged and floor_fraction > settings.max_floor_fraction:
        status = "not_converged"
        kinds = plan.kinds[a:bnd].sum(axis=0)
        names = ("the plasma-density floor", "the electron-temperature floor",
                 "the electron-temperature ceiling")
        worst_kind = names[int(np.argmax(kinds))]
        reason = (
            f"floors/ceilings hit in {floor_fraction:.2%} of cell-steps, mostly "
            f"{worst_kind} (limit {settings.max_floor_fraction:.2%}); {reason}"
        )
    margin = settings.energy_bound_tolerance
    edge = v_d + max(sheath, 0.0)
    # the plasma may rise above the sheath edge by a Boltzmann pre-sheath of a couple of
    # T_e at the anode (density ratio e^2; common practice, no source), no more
    hump_allowed = margin * v_d + _PRESHEATH_RISE_TE * float(te[0])
    if status in ("ok", "oscillating") and (
        u_peak > (1.0 + margin) * u_bound
        or phi_max - edge > hump_allowed
        or exit_energy > (1.0 + margin) * edge
    ):
        status = "failed"
        reason = (
            f"energy bound broken: peak ion speed {u_peak:.4g} m/s against "
            f"sqrt(2 e phi_max / M) = {u_bound:.4g} m/s, potential peak {phi_max:.4g} V "
            f"against V_d + anode fall = {edge:.4g} V (allowed rise {hump_allowed:.3g} V), "
            f"exit ion energy {exit_energy:.4g} eV (margin {margin:.0%}); {reason}"
        )
    mass_util = float(glob["mass_utilization"])
    eta_a = float(glob["anode_efficiency"])
    if status != "failed" and (mass_util < _EXTINCT_MASS_UTILIZATION or eta_a > 1.0):
        # a discharge that went out (plasma at the density floor, a current of micro- to
        # milliamperes) keeps "converging" on the neutral flow; its efficiency T^2 / (2 mdot P)
        # then exceeds 1 (thermal neutral momentum over a vanishing power): never usable
        status = "failed"
        reason = (
            f"discharge went out: mass utilization {mass_util:.3g} (below "
            f"{_EXTINCT_MASS_UTILIZATION:g}) or anode efficiency {eta_a:.3g} above 1, discharge "
            f"current {current:.3g} A; {reason}"
        )
    glob["status"] = status
    glob["converged"] = status in ("ok", "oscillating")
    glob["reason"] = reason
    glob["wall_time_s"] = time.perf_counter() - t0
    t_hist = dts * (math.ceil(t_a / dts - 1e-9) + np.arange(samples.size))
    return SolverResult(
        status, reason, cells, glob, {"time_s": t_hist, "discharge_current_A": samples}
    )
