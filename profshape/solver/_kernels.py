"""Numba inner loops of the 1-D discharge march (private).

Everything here works on plain float arrays in SI units, except electron
temperatures and energies, which are in eV (and potentials in V). The public
entry point is :func:`march`, called by :mod:`profshape.solver.model` once
per group of averaging chunks.

Scheme, per time step (see :mod:`profshape.solver.model` for the equations):

1. rates, collision frequencies, the secondary-electron yield of the walls and
   the cross-field mobility from the state;
2. the discharge current from the integral of Ohm's law between the anode
   sheath edge (potential V_d + anode fall) and the cathode plane (voltage
   constraint), then E(z);
3. ion face fluxes (Rusanov with MUSCL reconstruction), a Bohm sink with the
   pre-sheath density factor at the anode, supersonic outflow at the cathode
   plane;
4. neutrals: two upwind populations (anode gas moving downstream, ingested
   background gas moving upstream), ionization sink implicit, wall
   recombination source equal to the ion wall sink (exact discrete mass
   conservation);
5. ions: ionization source, wall sink, electric force, charge-exchange and
   elastic ion-neutral momentum transfer (implicit in the ion momentum);
6. electron energy: backward Euler in T_e with upwind convection, conduction,
   Ohmic heating and linearised losses (one tridiagonal solve);
7. time integrals for the averages and the balance diagnostics.

The ion and neutral updates are advanced with the two-stage strong-stability-
preserving Runge-Kutta method (SSP-RK2, Shu and Osher 1988) when ``rk2`` is
set; the electric field and the transport coefficients are frozen over the
step, so the second stage re-evaluates fluxes and sources only.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from numba import njit

from .. import constants

__all__: list[str] = []

# fast-math without "nnan"/"ninf", so that the finiteness checks keep working
_FM = {"nsz", "arcp", "contract", "afn", "reassoc"}

# module-level floats, read by numba as compile-time constants
_E = constants.e  # elementary charge [C]
_ME = constants.m_e  # electron mass [kg]
_PI = math.pi

# Status codes returned by march().
OK = 0
NONFINITE_CURRENT = 1
NONFINITE_TEMPERATURE = 2
NONFINITE_DENSITY = 3
NONFINITE_ION_FLUX = 4
TIME_STEP_COLLAPSE = 5
VELOCITY_RUNAWAY = 6

# Field indices of the per-cell accumulators acc[chunk, field, cell].
A_NE, A_GI, A_NN, A_TE, A_PHI, A_EF, A_NU, A_FN, A_SRC, A_SEE, A_NI_END, A_EI = range(12)
N_CELL_FIELDS = 12
# Indices of the global accumulators acc_g[chunk, k].
(G_CUR, G_CUR2, G_ION_OUT, G_MOM_OUT, G_NEU_OUT, G_IN, G_T, G_ION_ANODE, G_ENERGY_OUT,
 G_IONIZATION, G_WALL, G_INGEST, G_SHEATH, G_CUR_MIN, G_CUR_MAX, G_CX_MOM, G_DRAG_MOM,
 G_EFORCE, G_WALL_MOM, G_IZ_MOM, G_ANODE_MOM, G_BIRTH_PHI) = range(22)  # fmt: skip
N_GLOBALS = 22

# Array types of the kernel arguments (annotations only: numba types the arguments
# from the values passed, not from these hints).
_F64 = npt.NDArray[np.float64]
_I64 = npt.NDArray[np.int64]


@njit(cache=True, inline="always", fastmath=_FM)
def _limited_slope(a: float, b: float) -> float:
    """Van Leer's harmonic slope limiter 2ab / (a + b), 0 at extrema (van Leer 1974).

    Clips less than minmod, so smooth extrema keep more of the second-order accuracy.
    """
    ab = a * b
    if ab <= 0.0:
        return 0.0
    return 2.0 * ab / (a + b)


@njit(cache=True, inline="always", fastmath=_FM)
def coulomb_log_nrl(n_m3: float, te_eV: float) -> float:
    """Electron-ion Coulomb logarithm, NRL Plasma Formulary (Z = 1), floored at 1."""
    n_cm3 = n_m3 * 1e-6
    if te_eV < 10.0:
        ll = 23.0 - math.log(math.sqrt(n_cm3) / (te_eV * math.sqrt(te_eV)))
    else:
        ll = 24.0 - math.log(math.sqrt(n_cm3) / te_eV)
    return max(ll, 1.0)


@njit(cache=True, inline="always", fastmath=_FM)
def nu_ei_nrl(n_m3: float, te_eV: float) -> float:
    """Electron-ion collision frequency 2.91e-6 n[cm^-3] lnL T^-3/2 [1/s] (NRL)."""
    return 2.91e-12 * n_m3 * coulomb_log_nrl(n_m3, te_eV) / (te_eV * math.sqrt(te_eV))


@njit(cache=True, inline="always", fastmath=_FM)
def _heavy_rhs(
    i: int, nn: _F64, nb: _F64, nw: _F64, ni: _F64, gi: _F64, qi: _F64, ne: _F64, ef: _F64,
    kiz: _F64, nu_w: _F64, k_in: _F64, u_n: float, u_b: float, f_up: float, e_over_m: float,
    fn: _F64, fg: _F64, fq: _F64, fnn: _F64, fnb: _F64, fnw: _F64, inv_dz: float,
) -> tuple[float, float, float, float, float, float]:  # fmt: skip
    """Right-hand sides (dn_n, dn_b, dn_w, dn_i, dg_i, dq_i)/dt of cell i, explicit part.

    The ions lost to the walls recombine there and are re-emitted as neutrals at the
    wall temperature, a fraction f_up moving upstream (population n_w), the rest
    downstream with the anode gas.

    q_i is the ion kinetic-energy density over M, summed over all ions (directed energy
    plus the spread of ions born at different potentials); ions are born at the neutral
    drift speed, lost to the walls with their mean energy, and replaced by ions at the
    neutral speed by the ion-neutral collisions (the charge-exchange picture, applied to
    the elastic part too).
    """
    rw = nu_w[i] * ni[i]  # ions lost to the walls = neutrals re-emitted there
    rate = ne[i] * kiz[i]
    dnn = -(fnn[i + 1] - fnn[i]) * inv_dz + (1.0 - f_up) * rw - rate * nn[i]
    dnb = -(fnb[i + 1] - fnb[i]) * inv_dz - rate * nb[i]
    dnw = -(fnw[i + 1] - fnw[i]) * inv_dz + f_up * rw - rate * nw[i]
    siz = rate * (nn[i] + nb[i] + nw[i])
    # momentum and energy of the newly born ions: each keeps its neutral's velocity
    smom = rate * ((nn[i] - nw[i]) * u_n - nb[i] * u_b)
    sen = 0.5 * rate * ((nn[i] + nw[i]) * u_n * u_n + nb[i] * u_b * u_b)
    dni = -(fn[i + 1] - fn[i]) * inv_dz + siz - rw
    dgi = -(fg[i + 1] - fg[i]) * inv_dz + e_over_m * ne[i] * ef[i] + smom
    dgi += -nu_w[i] * gi[i] - k_in[i] * (gi[i] - ni[i] * u_n)
    dqi = -(fq[i + 1] - fq[i]) * inv_dz + e_over_m * ef[i] * gi[i] + sen
    dqi += -nu_w[i] * qi[i] - k_in[i] * (qi[i] - 0.5 * ni[i] * u_n * u_n)
    return dnn, dnb, dnw, dni, dgi, dqi


@njit(cache=True, inline="always", fastmath=_FM)
def _ion_fluxes(
    ni: _F64, gi: _F64, qi: _F64, cs: _F64, muscl: bool, fn: _F64, fg: _F64, fq: _F64,
    uw: _F64, ew: _F64, sn: _F64, su: _F64, se: _F64, presheath: float,
) -> None:  # fmt: skip
    """Rusanov face fluxes of ion number, momentum/M and energy/M (fills fn, fg, fq).

    Density, velocity and the mean energy per ion e_i = q_i / n (over M) are
    reconstructed (van Leer). The energy is carried at the fluid velocity and does
    not act back on the momentum (no ion pressure). uw, ew, sn, su, se: work arrays.
    """
    n = ni.shape[0]
    for i in range(n):
        uw[i] = gi[i] / ni[i]
        ew[i] = qi[i] / ni[i]
    sn[0] = 0.0
    su[0] = 0.0
    se[0] = 0.0
    sn[n - 1] = 0.0
    su[n - 1] = 0.0
    se[n - 1] = 0.0
    for i in range(1, n - 1):
        if muscl:
            sn[i] = 0.5 * _limited_slope(ni[i] - ni[i - 1], ni[i + 1] - ni[i])
            su[i] = 0.5 * _limited_slope(uw[i] - uw[i - 1], uw[i + 1] - uw[i])
            se[i] = 0.5 * _limited_slope(ew[i] - ew[i - 1], ew[i + 1] - ew[i])
        else:
            sn[i] = 0.0
            su[i] = 0.0
            se[i] = 0.0
    u0 = uw[0]
    if u0 > -cs[0]:  # subsonic towards the anode: Bohm flux at the pre-sheath density
        fn[0] = -presheath * ni[0] * cs[0]
        fg[0] = fn[0] * (-cs[0])
        # ions leave with their mean energy or the Bohm energy, whichever is larger
        fq[0] = fn[0] * max(ew[0], 0.5 * cs[0] * cs[0])
    else:
        fn[0] = gi[0]
        fg[0] = gi[0] * u0
        fq[0] = gi[0] * ew[0]
    for f in range(1, n):
        l = f - 1
        nl = ni[l] + sn[l]
        ul = uw[l] + su[l]
        el = ew[l] + se[l]
        nr = ni[f] - sn[f]
        ur = uw[f] - su[f]
        er = ew[f] - se[f]
        a = max(abs(ul) + cs[l], abs(ur) + cs[f])
        gl = nl * ul
        gr = nr * ur
        fn[f] = 0.5 * (gl + gr) - 0.5 * a * (nr - nl)
        fg[f] = 0.5 * (gl * ul + gr * ur) - 0.5 * a * (gr - gl)
        fq[f] = 0.5 * (gl * el + gr * er) - 0.5 * a * (nr * er - nl * el)
    if gi[n - 1] > 0.0:
        fn[n] = gi[n - 1]
        fg[n] = gi[n - 1] * uw[n - 1]
        fq[n] = gi[n - 1] * ew[n - 1]
    else:  # never let the cathode plane feed ions in
        fn[n] = 0.0
        fg[n] = 0.0
        fq[n] = 0.0


@njit(cache=True, inline="always", fastmath=_FM)
def _neutral_fluxes(
    nn: _F64, nb: _F64, nw: _F64, u_n: float, u_b: float, fnn: _F64, fnb: _F64, fnw: _F64,
    muscl: bool,
) -> None:  # fmt: skip
    """Upwind neutral face fluxes with van Leer-limited linear reconstruction.

    fnn[1..n] (anode gas, moving downstream), fnb[0..n-1] (ingested gas, moving
    upstream) and fnw[0..n-1] (gas re-emitted by the walls moving upstream at u_n,
    none entering through the cathode plane); the boundary faces fnn[0] and fnb[n]
    are set by the caller.
    """
    n = nn.shape[0]
    for f in range(1, n + 1):
        l = f - 1
        v = nn[l]
        if muscl and 1 <= l <= n - 2:
            v += 0.5 * _limited_slope(nn[l] - nn[l - 1], nn[l + 1] - nn[l])
        fnn[f] = u_n * v
    for f in range(n):
        v = nb[f]
        if muscl and 1 <= f <= n - 2:
            v -= 0.5 * _limited_slope(nb[f] - nb[f - 1], nb[f + 1] - nb[f])
        fnb[f] = -u_b * v
        v = nw[f]
        if muscl and 1 <= f <= n - 2:
            v -= 0.5 * _limited_slope(nw[f] - nw[f - 1], nw[f + 1] - nw[f])
        fnw[f] = -u_n * v
    fnw[n] = 0.0


@njit(cache=True, inline="always", fastmath=_FM)
def _ion_energy_floor(ni: _F64, gi: _F64, qi: _F64, i: int, warm: bool) -> None:
    """Keep q_i >= 0; without the energy equation (warm False) q_i = n u^2 / 2."""
    if not warm:
        qi[i] = 0.5 * gi[i] * gi[i] / ni[i]
    elif qi[i] < 0.0:
        qi[i] = 0.0


@njit(cache=True, fastmath=_FM, nogil=True)
def march(
    nn: _F64, nb: _F64, nw: _F64, ni: _F64, gi: _F64, qi: _F64, te: _F64, sheath: _F64,
    # state (modified in place) [m^-3 x4, m^-2 s^-1, m^-1 s^-2 (ion energy density / M),
    # eV, V]
    dz: float, area: float, ion_mass: float, u_n: float, u_b: float, f_up: float,
    gamma_in: float, gamma_bg: float, v_d: float, te_cath: float,
    omega_ce: _F64, nu_anom: _F64, wall_frac: _F64, wall_rate_factor: float,
    w_inv_tab: _F64, w_pow_tab: _F64, w_slope_tab: _F64,
    rate_t0: float, rate_inv_dt: float, k_iz_tab: _F64, k_loss_tab: _F64, k_en_tab: _F64,
    cex_a: float, cex_b: float, k_elastic: float, v_n_thermal: float,
    n_floor: float, te_floor: float, te_ceiling: float, cfl: float, dt_max: float,
    muscl: bool, rk2: bool, warm: bool, u_guard: float,
    fall_min: float, fall_max: float, fall_time_s: float,
    t_start: float, t_end: float, sample_dt: float, chunk_dt: float,
    acc: _F64,  # (n_chunks, N_CELL_FIELDS, N) time-weighted sums per chunk, modified in place
    acc_g: _F64,  # (n_chunks, N_GLOBALS) time-weighted sums of global quantities per chunk
    samples: _F64,  # (n_samples,) discharge current samples [A] from t_start on
    hit_kinds: _I64,  # (3,) int64: density-floor, T_e-floor and T_e-ceiling hits, incremented
) -> tuple[int, int, float, int, int, int]:  # fmt: skip
    """Advance the state from t_start to t_end; accumulate time integrals.

    Returns
    -------
    (status, n_steps, t_reached, n_floor_hits, n_samples_written, bad_cell)
    """
    n = ni.shape[0]
    e_over_m = _E / ion_mass
    mu_pref = _E / _ME  # e/m_e; mobility = mu_pref / nu / (1 + Omega^2) [m^2/(V s)]
    ve_pref = math.sqrt(8.0 * _E / (_PI * _ME))  # mean electron speed per sqrt(T_e[eV])

    ne = np.empty(n)
    ui = np.empty(n)
    cs = np.empty(n)
    inv_mu = np.empty(n)
    inv_ne = np.empty(n)
    lnl = np.empty(n)
    n_tab = k_iz_tab.shape[0]
    kiz = np.empty(n)
    kloss = np.empty(n)
    nu_tot = np.empty(n)
    nu_w = np.empty(n)  # ion wall-loss frequency [1/s]
    wloss = np.empty(n)  # electron wall energy loss per electron per second / T_e [1/s]
    wslope = np.empty(n)  # d(wall power per electron)/dT_e [1/s]
    see = np.empty(n)
    k_in = np.empty(n)  # ion-neutral momentum-transfer frequency [1/s]
    k_cx = np.empty(n)  # its resonant charge-exchange part [1/s]
    p = np.empty(n)
    dp = np.empty(n)
    ef = np.empty(n)
    fn = np.empty(n + 1)  # ion number flux at faces
    fg = np.empty(n + 1)  # ion momentum flux / M at faces
    fq = np.empty(n + 1)  # ion energy flux / M at faces
    qi1 = np.empty(n)
    ew = np.empty(n)
    se = np.empty(n)
    fnn = np.empty(n + 1)  # anode-gas neutral flux at faces
    fnb = np.empty(n + 1)  # ingested background-gas flux at faces (negative)
    fnw = np.empty(n + 1)  # upstream flux of the gas re-emitted by the walls (negative)
    nw1 = np.empty(n)
    kap = np.empty(n)
    heat = np.empty(n)
    lossc = np.empty(n)
    a_lo = np.empty(n)
    a_di = np.empty(n)
    a_up = np.empty(n)
    rhs = np.empty(n)
    cprime = np.empty(n)
    nn1 = np.empty(n)
    nb1 = np.empty(n)
    ni1 = np.empty(n)
    gi1 = np.empty(n)
    src0 = np.empty(n)
    phi = np.empty(n + 1)
    fn0_save = np.empty(n + 1)
    uw = np.empty(n)
    sn = np.empty(n)
    su = np.empty(n)
    inv_dz = 1.0 / dz

    t = t_start
    steps = 0
    floor_hits = 0
    n_samp = 0
    next_sample = t_start
    max_samples = samples.shape[0]
    n_chunks = acc.shape[0]
    for i in range(n):
        lnl[i] = coulomb_log_nrl(max(ni[i], n_floor), te[i])

    while t < t_end:
        # ---- 1. local coefficients --------------------------------------
        amax = 1.0
        for i in range(n):
            if ni[i] < n_floor:
                ni[i] = n_floor
                gi[i] = 0.0
                qi[i] = 0.0
                floor_hits += 1
                hit_kinds[0] += 1
            ne[i] = ni[i]
            inv_ne[i] = 1.0 / ni[i]
            ui[i] = gi[i] * inv_ne[i]
            tt = te[i]
            sq_t = math.sqrt(tt)
            cs[i] = math.sqrt(e_over_m) * sq_t
            a = abs(ui[i]) + cs[i]
            if a > amax:
                amax = a
            # one table index for the three rate tables
            s_t = (tt - rate_t0) * rate_inv_dt
            if s_t <= 0.0:
                s_t = 0.0
            elif s_t >= n_tab - 1.001:
                s_t = n_tab - 1.001
            kt = int(s_t)
            ft = s_t - kt
            kiz[i] = k_iz_tab[kt] + ft * (k_iz_tab[kt + 1] - k_iz_tab[kt])
            kloss[i] = k_loss_tab[kt] + ft * (k_loss_tab[kt + 1] - k_loss_tab[kt])
            ken = k_en_tab[kt] + ft * (k_en_tab[kt + 1] - k_en_tab[kt])
            if steps % 8 == 0:  # the Coulomb logarithm varies slowly: refresh every 8 steps
                lnl[i] = coulomb_log_nrl(ne[i], tt)
            nu_ei = 2.91e-12 * ne[i] * lnl[i] / (tt * sq_t)
            # walls (tabulated in T_e, see model._wall_tables): Bohm ion flux at the
            # pre-sheath density on both walls, primary electrons nu_w / (1 - sigma), wall
            # power per electron and its slope in T_e for the Newton linearisation
            cw = wall_frac[i] * wall_rate_factor
            nuw = cw * cs[i]
            nu_w[i] = nuw
            inv1m = w_inv_tab[kt] + ft * (w_inv_tab[kt + 1] - w_inv_tab[kt])
            wpow = w_pow_tab[kt] + ft * (w_pow_tab[kt + 1] - w_pow_tab[kt])
            wsl = w_slope_tab[kt] + ft * (w_slope_tab[kt + 1] - w_slope_tab[kt])
            see[i] = 1.0 - 1.0 / inv1m
            wloss[i] = cw * wpow / tt  # per electron per second / T_e
            wslope[i] = cw * wsl if wsl > 0.0 else 0.0
            nu = (nn[i] + nb[i] + nw[i]) * ken + nu_ei + nuw * inv1m + nu_anom[i]
            nu_tot[i] = nu
            om = omega_ce[i]
            # mu = (e/m) / nu / (1 + (om/nu)^2) = (e/m) nu / (nu^2 + om^2)
            inv_mu[i] = (nu * nu + om * om) / (mu_pref * nu)
            p[i] = ne[i] * tt
            if steps % 4 == 0:  # ion-neutral drag varies slowly: refresh every 4 steps
                # charge exchange (sigma = (a - b log10 E) m^2, E the ion energy in the
                # neutral frame [eV]) at the relative speed with the neutral thermal
                # spread, plus the velocity-independent elastic (polarization) rate
                du = ui[i] - u_n
                g = math.sqrt(du * du + v_n_thermal * v_n_thermal)
                e_rel = 0.5 * du * du / e_over_m
                if e_rel < 0.1:
                    e_rel = 0.1
                sig_cx = cex_a - cex_b * math.log10(e_rel)
                if sig_cx < 0.0:
                    sig_cx = 0.0
                k_cx[i] = (nn[i] + nb[i] + nw[i]) * sig_cx * g
                k_in[i] = k_cx[i] + (nn[i] + nb[i] + nw[i]) * k_elastic
        if amax > u_guard:
            k_bad = 0
            for i in range(n):
                if abs(ui[i]) + cs[i] >= amax:
                    k_bad = i
            return VELOCITY_RUNAWAY, steps, t, floor_hits, n_samp, k_bad

        # ---- 2. Ohm's law and the voltage constraint --------------------
        dp[0] = (p[1] - p[0]) * inv_dz
        dp[n - 1] = (p[n - 1] - p[n - 2]) * inv_dz
        for i in range(1, n - 1):
            dp[i] = (p[i + 1] - p[i - 1]) * (0.5 * inv_dz)
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for i in range(n):
            s1 += inv_ne[i] * inv_mu[i]
            s2 += ui[i] * inv_mu[i]
            s3 += dp[i] * inv_ne[i]
        v_edge = v_d + sheath[0]  # plasma potential at the anode sheath edge
        jflux = (v_edge * inv_dz + s2 + s3) / s1  # j / e  [m^-2 s^-1]
        if not math.isfinite(jflux):
            return NONFINITE_CURRENT, steps, t, floor_hits, n_samp, 0
        emax = 0.0
        for i in range(n):
            ef[i] = (jflux * inv_ne[i] - ui[i]) * inv_mu[i] - dp[i] * inv_ne[i]
            if abs(ef[i]) > emax:
                emax = abs(ef[i])
        phi[0] = v_edge
        for i in range(n):
            phi[i + 1] = phi[i] - ef[i] * dz
        # time step: Courant number on |u_i| + c_s, and on the ion acceleration
        # (an ion starting at rest must not cross more than a cell per step)
        dt = cfl * dz / amax
        if emax > 0.0:
            dt_acc = cfl * math.sqrt(dz / (e_over_m * emax))
            if dt_acc < dt:
                dt = dt_acc
        if dt > dt_max:
            dt = dt_max
        if dt <= 1e-13:
            return TIME_STEP_COLLAPSE, steps, t, floor_hits, n_samp, 0
        if t + dt > t_end:
            dt = t_end - t
            if dt <= 1e-16 * t_end:  # rounding left a sliver of the interval: done
                t = t_end
                break

        # ---- 3.-5. heavy particles (SSP-RK2 or forward Euler) -----------
        _ion_fluxes(ni, gi, qi, cs, muscl, fn, fg, fq, uw, ew, sn, su, se, 0.6065306597126334)
        for f in range(n + 1):
            fn0_save[f] = fn[f]
        fnb[n] = -gamma_bg
        _neutral_fluxes(nn, nb, nw, u_n, u_b, fnn, fnb, fnw, muscl)
        # anode: injected flow + ions recombined on the anode + ingested gas and gas from
        # the walls arriving there, all re-emitted downstream
        fnn[0] = gamma_in - fn[0] - fnb[0] - fnw[0]
        # momentum bookkeeping of the step (per unit area / M; first-stage values, the
        # stages differ by O(dt) only): charge exchange and all ion-neutral drag, wall
        # loss, ionization source
        m_cx = 0.0
        m_drag = 0.0
        m_wall = 0.0
        m_iz = 0.0
        fg0 = fg[0]
        for i in range(n):
            src0[i] = ne[i] * kiz[i] * (nn[i] + nb[i] + nw[i]) - nu_w[i] * ni[i]
            rel = gi[i] - ni[i] * u_n
            if rel > 0.0:  # fast neutrals moving downstream leave with the exhaust
                m_cx += k_cx[i] * rel
            m_drag += k_in[i] * rel
            m_wall += nu_w[i] * gi[i]
            m_iz += ne[i] * kiz[i] * ((nn[i] - nw[i]) * u_n - nb[i] * u_b)
        for i in range(n):
            dnn, dnb, dnw, dni, dgi, dqi = _heavy_rhs(
                i, nn, nb, nw, ni, gi, qi, ne, ef, kiz, nu_w, k_in, u_n, u_b, f_up, e_over_m,
                fn, fg, fq, fnn, fnb, fnw, inv_dz)  # fmt: skip
            nn1[i] = max(nn[i] + dt * dnn, 0.0)
            nb1[i] = max(nb[i] + dt * dnb, 0.0)
            nw1[i] = max(nw[i] + dt * dnw, 0.0)
            ni1[i] = ni[i] + dt * dni
            gi1[i] = gi[i] + dt * dgi
            qi1[i] = qi[i] + dt * dqi
        if rk2:
            for i in range(n):
                if ni1[i] < n_floor:
                    ni1[i] = n_floor
                    gi1[i] = 0.0
                    qi1[i] = 0.0
                _ion_energy_floor(ni1, gi1, qi1, i, warm)
            # second stage with the stage-1 state; E, rates and T_e frozen over the step
            _ion_fluxes(ni1, gi1, qi1, cs, muscl, fn, fg, fq, uw, ew, sn, su, se,
                        0.6065306597126334)  # fmt: skip
            _neutral_fluxes(nn1, nb1, nw1, u_n, u_b, fnn, fnb, fnw, muscl)
            fnn[0] = gamma_in - fn[0] - fnb[0] - fnw[0]
            for i in range(n):
                dnn, dnb, dnw, dni, dgi, dqi = _heavy_rhs(
                    i, nn1, nb1, nw1, ni1, gi1, qi1, ne, ef, kiz, nu_w, k_in, u_n, u_b, f_up,
                    e_over_m, fn, fg, fq, fnn, fnb, fnw, inv_dz)  # fmt: skip
                nn1[i] = max(0.5 * (nn[i] + nn1[i] + dt * dnn), 0.0)
                nb1[i] = max(0.5 * (nb[i] + nb1[i] + dt * dnb), 0.0)
                nw1[i] = max(0.5 * (nw[i] + nw1[i] + dt * dnw), 0.0)
                ni1[i] = 0.5 * (ni[i] + ni1[i] + dt * dni)
                gi1[i] = 0.5 * (gi[i] + gi1[i] + dt * dgi)
                qi1[i] = 0.5 * (qi[i] + qi1[i] + dt * dqi)
            # time-averaged face fluxes of the step (the two stages' mean)
            for f in range(n + 1):
                fn0_save[f] = 0.5 * (fn0_save[f] + fn[f])
        # ---- 6. electron energy (implicit in T_e) ------------------------
        for i in range(n):
            kap[i] = 2.5 * ne[i] * te[i] / inv_mu[i]  # cross-field conductivity [1/(m s)]
            ge = ui[i] * ne[i] - jflux  # electron flux at the cell [m^-2 s^-1]
            h = -ge * ef[i]  # Ohmic heating j_e . E [eV m^-3 s^-1]
            inv_t = 1.0 / te[i]
            # losses: inelastic (ionization + excitation) and wall (sheath) losses
            # wall power W(T) linearised about the old T: W0 + W'(T - T0)
            lossc[i] = ne[i] * (nn[i] + nb[i] + nw[i]) * kloss[i] * inv_t + ne[i] * wslope[i]
            h += ne[i] * (wslope[i] - wloss[i]) * te[i]
            if h < 0.0:
                lossc[i] += -h * inv_t
                h = 0.0
            heat[i] = h
        nnew_floor = 0
        for i in range(n):
            nen = ni1[i]
            if nen < n_floor:
                nen = n_floor
                nnew_floor += 1
            a_di[i] = 1.5 * nen / dt + lossc[i]
            a_lo[i] = 0.0
            a_up[i] = 0.0
            rhs[i] = 1.5 * ne[i] * te[i] / dt + heat[i]
        # interior faces f between l = f-1 and r = f
        for f in range(1, n):
            l = f - 1
            r = f
            gef = fn0_save[f] - jflux  # electron flux at the face
            kf = 0.5 * (kap[l] + kap[r]) * inv_dz
            # convection 2.5 gef T_face, conduction -kf (T_r - T_l); T_face central
            # (second order) where the cell Peclet number 2.5 |gef| / kf <= 2, upwind
            # beyond (hybrid scheme, Spalding 1972: keeps the matrix an M-matrix)
            conv = 2.5 * gef
            if abs(conv) <= 2.0 * kf:
                cp = 0.5 * conv
                cm = 0.5 * conv
            else:
                cp = max(conv, 0.0)
                cm = min(conv, 0.0)
            a_di[l] += (cp + kf) * inv_dz
            a_up[l] += (cm - kf) * inv_dz
            a_di[r] += (-cm + kf) * inv_dz
            a_lo[r] += (-cp - kf) * inv_dz
        # anode face: zero conductive flux; electrons leave through the sheath with
        # 2 T_e + the sheath fall each (or the enthalpy 5/2 T_e if the fall is negative)
        ge0 = fn0_save[0] - jflux
        per = 2.5
        if sheath[0] > 0.0:
            per = 2.0 + sheath[0] / te[0]
        a_di[0] += -per * ge0 * inv_dz if ge0 < 0.0 else 0.0
        # cathode face: Dirichlet T = te_cath half a cell away
        gen = fn0_save[n] - jflux
        kf = 2.0 * kap[n - 1] * inv_dz
        a_di[n - 1] += kf * inv_dz
        rhs[n - 1] += kf * inv_dz * te_cath
        if gen > 0.0:
            a_di[n - 1] += 2.5 * gen * inv_dz
        else:
            rhs[n - 1] += -2.5 * gen * inv_dz * te_cath
        # Thomas algorithm
        cprime[0] = a_up[0] / a_di[0]
        rhs[0] = rhs[0] / a_di[0]
        for i in range(1, n):
            m = a_di[i] - a_lo[i] * cprime[i - 1]
            cprime[i] = a_up[i] / m
            rhs[i] = (rhs[i] - a_lo[i] * rhs[i - 1]) / m
        te[n - 1] = rhs[n - 1]
        for i in range(n - 2, -1, -1):
            te[i] = rhs[i] - cprime[i] * te[i + 1]
        for i in range(n):
            tt = te[i]
            if not math.isfinite(tt):
                return NONFINITE_TEMPERATURE, steps, t, floor_hits, n_samp, i
            if tt < te_floor:
                te[i] = te_floor
                floor_hits += 1
                hit_kinds[1] += 1
            elif tt > te_ceiling:
                te[i] = te_ceiling
                floor_hits += 1
                hit_kinds[2] += 1
            nn[i] = nn1[i]
            nb[i] = nb1[i]
            nw[i] = nw1[i]
            ni[i] = ni1[i]
            gi[i] = gi1[i]
            if ni[i] > 0.0:
                _ion_energy_floor(ni1, gi1, qi1, i, warm)
            qi[i] = qi1[i]
            if not math.isfinite(ni[i]):
                return NONFINITE_DENSITY, steps, t, floor_hits, n_samp, i
            if not math.isfinite(gi[i]):
                return NONFINITE_ION_FLUX, steps, t, floor_hits, n_samp, i
        floor_hits += nnew_floor
        hit_kinds[0] += nnew_floor

        # ---- anode fall: sheath that passes the electron current the plasma needs ----
        # electron flux into the anode; random (thermal) flux n v_e / 4 at the sheath edge
        g_req = jflux - fn0_save[0]
        t0a = te[0]
        g_th = 0.25 * ne[0] * ve_pref * math.sqrt(t0a)
        target = fall_min * t0a
        if g_req > 0.0:
            target = t0a * math.log(g_th / g_req)
        if target < fall_min * t0a:
            target = fall_min * t0a
        if target > fall_max * t0a:
            target = fall_max * t0a
        w = dt / (dt + fall_time_s)
        sheath[0] += w * (target - sheath[0])

        # ---- 7. time integrals (weight dt) --------------------------------
        c = int((t - t_start) / chunk_dt)
        if c >= n_chunks:
            c = n_chunks - 1
        a2 = acc[c]
        t_next = t + dt
        if t_next >= t_end * (1.0 - 1e-15) or int((t_next - t_start) / chunk_dt) != c:
            for i in range(n):  # ion density at the end of the chunk (its last step)
                a2[A_NI_END, i] = ni[i]
        ion_total = 0.0
        wall_total = 0.0
        eforce = 0.0
        birth_phi = 0.0
        for i in range(n):
            a2[A_NE, i] += dt * ne[i]
            a2[A_GI, i] += dt * gi[i]
            a2[A_NN, i] += dt * (nn[i] + nb[i] + nw[i])
            a2[A_TE, i] += dt * te[i]
            a2[A_PHI, i] += dt * 0.5 * (phi[i] + phi[i + 1])
            a2[A_EF, i] += dt * ef[i]
            a2[A_NU, i] += dt * nu_tot[i]
            a2[A_FN, i] += dt * fn0_save[i]  # ion flux at the face on the anode side
            a2[A_SRC, i] += dt * src0[i]  # net ion source (ionization - wall loss)
            a2[A_SEE, i] += dt * see[i]
            a2[A_EI, i] += dt * qi[i] / e_over_m  # ion energy density [eV m^-3]
            ion_total += ne[i] * kiz[i] * (nn[i] + nb[i] + nw[i])
            birth_phi += ne[i] * kiz[i] * (nn[i] + nb[i] + nw[i]) * 0.5 * (phi[i] + phi[i + 1])
            wall_total += nu_w[i] * ne[i]
            eforce += ne[i] * ef[i]
        cur = _E * area * jflux
        ag = acc_g[c]
        ag[G_CUR] += dt * cur
        ag[G_CUR2] += dt * cur * cur
        ag[G_ION_OUT] += dt * fn0_save[n]  # ion flux through the cathode plane
        un = gi[n - 1] * inv_ne[n - 1] if gi[n - 1] > 0.0 else 0.0
        ag[G_MOM_OUT] += dt * fn0_save[n] * un  # ion momentum flux / M out
        # ion energy flux * 2 / M out: twice the mean energy per ion (over M) of the last cell
        ag[G_ENERGY_OUT] += dt * fn0_save[n] * 2.0 * qi[n - 1] / ni[n - 1]
        ag[G_NEU_OUT] += dt * fnn[n]  # neutral flux through the cathode plane
        ag[G_IN] += dt * (gamma_in + gamma_bg)  # heavy-particle flux in
        ag[G_T] += dt
        ag[G_ION_ANODE] += dt * fn0_save[0]  # ion flux at the anode (negative: into it)
        ag[G_IONIZATION] += dt * ion_total * dz
        ag[G_WALL] += dt * wall_total * dz
        ag[G_INGEST] += dt * gamma_bg
        ag[G_SHEATH] += dt * sheath[0]
        ag[G_CX_MOM] += dt * m_cx * dz  # ion momentum / M handed to charge-exchange neutrals
        ag[G_DRAG_MOM] += dt * m_drag * dz  # all ion-neutral momentum transfer / M
        ag[G_EFORCE] += dt * e_over_m * eforce * dz  # electric force on the ions / M
        ag[G_WALL_MOM] += dt * m_wall * dz  # ion momentum / M carried into the walls
        ag[G_IZ_MOM] += dt * m_iz * dz  # momentum / M of the newly born ions
        ag[G_ANODE_MOM] += dt * fg0  # ion momentum flux / M at the anode face
        ag[G_BIRTH_PHI] += dt * birth_phi * dz  # ionization-weighted potential [V m^-2 s^-1]
        if cur < ag[G_CUR_MIN] or ag[G_CUR_MIN] == 0.0:
            ag[G_CUR_MIN] = cur
        if cur > ag[G_CUR_MAX]:
            ag[G_CUR_MAX] = cur
        while next_sample <= t + dt and n_samp < max_samples:
            samples[n_samp] = cur
            n_samp += 1
            next_sample += sample_dt
        t += dt
        steps += 1
    return OK, steps, t, floor_hits, n_samp, 0
