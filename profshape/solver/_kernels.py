"""Numba inner loops of the 1-D discharge march (private).

Everything here works on plain float arrays in SI units, except electron
temperatures and energies, which are in eV (and potentials in V). The public
entry point is :func:`march`, called by :mod:`profshape.solver.model` once
per averaging window.

Scheme, per time step (see :mod:`profshape.solver.model` for the equations):

1. rates, collision frequencies and the cross-field mobility from the state;
2. the discharge current from the integral of Ohm's law between anode and
   cathode plane (voltage constraint), then E(z) and the electron flux;
3. neutrals: upwind advection, ionization sink treated implicitly (positive);
4. ions: Rusanov (local Lax-Friedrichs) fluxes, Bohm-speed outflow into the
   anode, supersonic outflow at the cathode plane, ionization source equal to
   the neutral sink (exact discrete mass conservation);
5. electron energy: backward Euler in T_e with upwind convection, conduction,
   Ohmic heating and linearised losses (one tridiagonal solve).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__: list[str] = []

# fast-math without "nnan"/"ninf", so that the finiteness checks keep working
_FM = {"nsz", "arcp", "contract", "afn", "reassoc"}

_E = 1.602176634e-19  # elementary charge [C] (CODATA 2018, exact)
_ME = 9.1093837015e-31  # electron mass [kg] (CODATA 2018)

# Status codes returned by march().
OK = 0
NONFINITE_CURRENT = 1
NONFINITE_TEMPERATURE = 2
NONFINITE_DENSITY = 3
NONFINITE_ION_FLUX = 4
TIME_STEP_COLLAPSE = 5
VELOCITY_RUNAWAY = 6


@njit(cache=True, inline="always", fastmath=_FM)
def _interp(table, t0, inv_dt, x):
    """Linear interpolation on a uniform table starting at t0 with spacing 1/inv_dt."""
    s = (x - t0) * inv_dt
    if s <= 0.0:
        return table[0]
    n = table.shape[0]
    if s >= n - 1:
        return table[n - 1]
    k = int(s)
    f = s - k
    return table[k] * (1.0 - f) + table[k + 1] * f


@njit(cache=True, inline="always", fastmath=_FM)
def _minmod(a, b):
    if a * b <= 0.0:
        return 0.0
    if abs(a) < abs(b):
        return a
    return b


@njit(cache=True, inline="always", fastmath=_FM)
def coulomb_log_nrl(n_m3, te_eV):
    """Electron-ion Coulomb logarithm, NRL Plasma Formulary (Z = 1), floored at 1."""
    n_cm3 = n_m3 * 1e-6
    if te_eV < 10.0:
        ll = 23.0 - math.log(math.sqrt(n_cm3) / (te_eV * math.sqrt(te_eV)))
    else:
        ll = 24.0 - math.log(math.sqrt(n_cm3) / te_eV)
    return max(ll, 1.0)


@njit(cache=True, inline="always", fastmath=_FM)
def nu_ei_nrl(n_m3, te_eV):
    """Electron-ion collision frequency 2.91e-6 n[cm^-3] lnL T^-3/2 [1/s] (NRL)."""
    return 2.91e-12 * n_m3 * coulomb_log_nrl(n_m3, te_eV) / (te_eV * math.sqrt(te_eV))


@njit(cache=True, fastmath=_FM, nogil=True)
def march(
    nn, ni, gi, te,  # state (modified in place) [m^-3, m^-3, m^-2 s^-1, eV]
    dz, area, ion_mass, u_n, gamma_in, v_d, te_cath,
    omega_ce, nu_anom, wall_mask, wall_nu_factor, wall_loss_per_te,
    rate_t0, rate_inv_dt, k_iz_tab, k_loss_tab, k_en_tab,
    n_floor, te_floor, te_ceiling, cfl, dt_max, muscl, u_guard,
    t_start, t_end, sample_dt, chunk_dt,
    acc,  # (n_chunks, n_fields, N) time-weighted sums per chunk, modified in place
    acc_g,  # (n_chunks, n_global) time-weighted sums of global quantities per chunk
    samples,  # (n_samples,) discharge current samples [A] from t_start on
    hit_kinds,  # (3,) int64: density-floor, T_e-floor and T_e-ceiling hits, incremented
):
    """Advance the state from t_start to t_end; accumulate time integrals.

    Returns
    -------
    (status, n_steps, t_reached, n_floor_hits, n_samples_written, bad_cell)
    """
    n = ni.shape[0]
    e_over_m = _E / ion_mass
    mu_pref = _E / _ME  # e/m_e; mobility = mu_pref / nu / (1 + Omega^2) [m^2/(V s)]

    ne = np.empty(n)
    ui = np.empty(n)
    cs = np.empty(n)
    inv_mu = np.empty(n)
    inv_ne = np.empty(n)
    lnl = np.empty(n)
    sqrt_e_over_m = math.sqrt(e_over_m)
    n_tab = k_iz_tab.shape[0]
    kiz = np.empty(n)
    kloss = np.empty(n)
    nu_tot = np.empty(n)
    p = np.empty(n)
    dp = np.empty(n)
    ef = np.empty(n)
    fn = np.empty(n + 1)  # ion number flux at faces
    fg = np.empty(n + 1)  # ion momentum flux / M at faces
    fnn = np.empty(n + 1)  # neutral flux at faces
    kap = np.empty(n)
    heat = np.empty(n)
    lossc = np.empty(n)
    a_lo = np.empty(n)
    a_di = np.empty(n)
    a_up = np.empty(n)
    rhs = np.empty(n)
    cprime = np.empty(n)
    nn_new = np.empty(n)
    ne_new = np.empty(n)
    phi = np.empty(n + 1)
    sn = np.empty(n)
    su = np.empty(n)

    t = t_start
    steps = 0
    floor_hits = 0
    n_samp = 0
    next_sample = t_start
    max_samples = samples.shape[0]
    n_chunks = acc.shape[0]

    while t < t_end:
        # ---- 1. local coefficients --------------------------------------
        amax = 1.0
        for i in range(n):
            if ni[i] < n_floor:
                ni[i] = n_floor
                gi[i] = 0.0
                floor_hits += 1
                hit_kinds[0] += 1
            ne[i] = ni[i]
            inv_ne[i] = 1.0 / ni[i]
            ui[i] = gi[i] * inv_ne[i]
            tt = te[i]
            cs[i] = math.sqrt(e_over_m * tt)
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
            nu_ei = 2.91e-12 * ne[i] * lnl[i] / (tt * cs[i]) * sqrt_e_over_m
            nu = nn[i] * ken + nu_ei + wall_mask[i] * wall_nu_factor * cs[i]
            nu += nu_anom[i]
            nu_tot[i] = nu
            om = omega_ce[i]
            # mu = (e/m) / nu / (1 + (om/nu)^2) = (e/m) nu / (nu^2 + om^2)
            inv_mu[i] = (nu * nu + om * om) / (mu_pref * nu)
            p[i] = ne[i] * tt
        if amax > u_guard:
            k_bad = 0
            for i in range(n):
                if abs(ui[i]) + cs[i] >= amax:
                    k_bad = i
            return VELOCITY_RUNAWAY, steps, t, floor_hits, n_samp, k_bad

        # ---- 2. Ohm's law and the voltage constraint --------------------
        dp[0] = (p[1] - p[0]) / dz
        dp[n - 1] = (p[n - 1] - p[n - 2]) / dz
        for i in range(1, n - 1):
            dp[i] = (p[i + 1] - p[i - 1]) / (2.0 * dz)
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for i in range(n):
            s1 += inv_ne[i] * inv_mu[i]
            s2 += ui[i] * inv_mu[i]
            s3 += dp[i] * inv_ne[i]
        jflux = (v_d / dz + s2 + s3) / s1  # j / e  [m^-2 s^-1]
        if not math.isfinite(jflux):
            return NONFINITE_CURRENT, steps, t, floor_hits, n_samp, 0
        for i in range(n):
            ef[i] = (jflux * inv_ne[i] - ui[i]) * inv_mu[i] - dp[i] * inv_ne[i]
        phi[0] = v_d
        for i in range(n):
            phi[i + 1] = phi[i] - ef[i] * dz
        # time step: Courant number on |u_i| + c_s, and on the ion acceleration
        # (an ion starting at rest must not cross more than a cell per step)
        emax = 0.0
        for i in range(n):
            if abs(ef[i]) > emax:
                emax = abs(ef[i])
        dt = cfl * dz / amax
        if emax > 0.0:
            dt_acc = cfl * math.sqrt(dz / (e_over_m * emax))
            if dt_acc < dt:
                dt = dt_acc
        if dt > dt_max:
            dt = dt_max
        if t + dt > t_end:
            dt = t_end - t
        if dt <= 1e-13:
            return TIME_STEP_COLLAPSE, steps, t, floor_hits, n_samp, 0

        # ---- 3. ion face fluxes (Rusanov) --------------------------------
        ub = ui[0]
        if ub > -cs[0]:
            ub = -cs[0]
        fn[0] = ne[0] * ub
        fg[0] = ne[0] * ub * ub
        # MUSCL reconstruction of n and u (minmod slopes), zero slope in end cells
        sn[0] = 0.0
        su[0] = 0.0
        sn[n - 1] = 0.0
        su[n - 1] = 0.0
        if muscl:
            for i in range(1, n - 1):
                sn[i] = _minmod(ni[i] - ni[i - 1], ni[i + 1] - ni[i])
                su[i] = _minmod(ui[i] - ui[i - 1], ui[i + 1] - ui[i])
        else:
            for i in range(1, n - 1):
                sn[i] = 0.0
                su[i] = 0.0
        for f in range(1, n):
            l = f - 1
            r = f
            nl = ni[l] + 0.5 * sn[l]
            ul = ui[l] + 0.5 * su[l]
            nr = ni[r] - 0.5 * sn[r]
            ur = ui[r] - 0.5 * su[r]
            a = max(abs(ul) + cs[l], abs(ur) + cs[r])
            gl = nl * ul
            gr = nr * ur
            fn[f] = 0.5 * (gl + gr) - 0.5 * a * (nr - nl)
            fg[f] = 0.5 * (gl * ul + gr * ur) - 0.5 * a * (gr - gl)
        fn[n] = gi[n - 1]
        fg[n] = gi[n - 1] * ui[n - 1]
        if fn[n] < 0.0:  # never let the cathode plane feed ions in
            fn[n] = 0.0
            fg[n] = 0.0

        # ---- 4. neutrals (upwind, implicit ionization sink) --------------
        recomb = -fn[0] if fn[0] < 0.0 else 0.0
        fnn[0] = gamma_in + recomb
        for f in range(1, n + 1):
            fnn[f] = u_n * nn[f - 1]
        lam = dt / dz
        for i in range(n):
            num = nn[i] - lam * (fnn[i + 1] - fnn[i])
            if num < 0.0:
                num = 0.0
            nn_new[i] = num / (1.0 + dt * ne[i] * kiz[i])

        # ---- 5. ions ------------------------------------------------------
        for i in range(n):
            siz = ne[i] * kiz[i] * nn_new[i]
            ni_new = ni[i] - lam * (fn[i + 1] - fn[i]) + dt * siz
            gi_new = gi[i] - lam * (fg[i + 1] - fg[i]) + dt * (
                e_over_m * ne[i] * ef[i] + siz * u_n
            )
            ne_new[i] = ni_new
            gi[i] = gi_new
        # ---- 6. electron energy (implicit in T_e) ------------------------
        for i in range(n):
            kap[i] = 2.5 * ne[i] * te[i] / inv_mu[i]  # cross-field conductivity [1/(m s)]
            ge = ui[i] * ne[i] - jflux  # electron flux at the cell [m^-2 s^-1]
            h = -ge * ef[i]  # Ohmic heating j_e . E [eV m^-3 s^-1]
            inv_t = 1.0 / te[i]
            # losses: inelastic (ionization + excitation) and wall (sheath) losses
            lw = wall_mask[i] * wall_nu_factor * cs[i] * wall_loss_per_te
            lossc[i] = ne[i] * nn[i] * kloss[i] * inv_t + ne[i] * lw
            if h < 0.0:
                lossc[i] += -h * inv_t
                h = 0.0
            heat[i] = h
        nnew_floor = 0
        for i in range(n):
            nen = ne_new[i]
            if nen < n_floor:
                nen = n_floor
                nnew_floor += 1
            a_di[i] = 1.5 * nen / dt + lossc[i]
            a_lo[i] = 0.0
            a_up[i] = 0.0
            rhs[i] = 1.5 * ne[i] * te[i] / dt + heat[i]
        inv_dz = 1.0 / dz
        # interior faces f between l = f-1 and r = f
        for f in range(1, n):
            l = f - 1
            r = f
            gef = fn[f] - jflux  # electron flux at the face
            kf = 0.5 * (kap[l] + kap[r]) * inv_dz
            # convection 2.5 gef T_upwind, conduction -kf (T_r - T_l)
            cp = 2.5 * max(gef, 0.0)
            cm = 2.5 * min(gef, 0.0)
            # flux Q_f = cp*T_l + cm*T_r - kf*(T_r - T_l); leaves l, enters r
            a_di[l] += (cp + kf) * inv_dz
            a_up[l] += (cm - kf) * inv_dz
            a_di[r] += (-cm + kf) * inv_dz
            a_lo[r] += (-cp - kf) * inv_dz
        # anode face: zero conductive flux, electron enthalpy convected (upwind = cell 0)
        ge0 = fn[0] - jflux
        # Q_0 = 2.5 ge0 T_0 (positive into the domain when ge0 > 0); enters cell 0
        a_di[0] += -2.5 * ge0 * inv_dz if ge0 < 0.0 else 0.0
        # cathode face: Dirichlet T = te_cath half a cell away
        gen = fn[n] - jflux
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
            nn[i] = nn_new[i]
            ni[i] = ne_new[i]
            if not math.isfinite(ni[i]):
                return NONFINITE_DENSITY, steps, t, floor_hits, n_samp, i
            if not math.isfinite(gi[i]):
                return NONFINITE_ION_FLUX, steps, t, floor_hits, n_samp, i
        floor_hits += nnew_floor
        hit_kinds[0] += nnew_floor

        # ---- 7. time integrals (state at the start of the step, weight dt) --
        c = int((t - t_start) / chunk_dt)
        if c >= n_chunks:
            c = n_chunks - 1
        a2 = acc[c]
        for i in range(n):
            a2[0, i] += dt * ne[i]
            a2[1, i] += dt * ne[i] * ui[i]
            a2[2, i] += dt * nn[i]
            a2[3, i] += dt * te[i]
            a2[4, i] += dt * 0.5 * (phi[i] + phi[i + 1])
            a2[5, i] += dt * ef[i]
            a2[6, i] += dt * (ne[i] * ui[i] - jflux)  # electron flux from the current
            # electron flux from Ohm's law evaluated independently of the current
            a2[7, i] += dt * (-(ne[i] * ef[i] + dp[i]) / inv_mu[i])
            a2[8, i] += dt * nu_tot[i]
            a2[9, i] += dt * ne[i] * ui[i] * ui[i]
        cur = _E * area * jflux
        ag = acc_g[c]
        ag[0] += dt * cur
        ag[1] += dt * cur * cur
        ag[2] += dt * fn[n]  # ion flux through the cathode plane
        ag[3] += dt * fg[n]  # ion momentum flux / M through the cathode plane
        ag[4] += dt * fnn[n]  # neutral flux through the cathode plane
        ag[5] += dt * (fnn[0] + fn[0])  # net heavy-particle flux in at the anode
        ag[6] += dt
        ag[7] += dt * fn[0]  # ion flux at the anode (negative: into the anode)
        while next_sample <= t + dt and n_samp < max_samples:
            samples[n_samp] = cur
            n_samp += 1
            next_sample += sample_dt
        t += dt
        steps += 1
    return OK, steps, t, floor_hits, n_samp, 0
