"""Physics figures of the built-in solver on the demo device (prints them; not a test).

Run::

    PYTHONPATH=$PWD /work/venv/bin/python benchmarks/solver_figures.py

Prints, for the demo device at 4.5 mg/s xenon and the default profile, at 300 V
and 600 V: status, discharge current, thrust, mass utilization, peak electron
temperature, voltage utilization, maximum ion velocity against the energy bound
sqrt(2 e V_d / M) (M from scipy.constants), anode efficiency, and the largest
potential relative to V_d. Works against any checkout of profshape that has
``profshape.solver`` (so a stored commit can be compared with the same script).
"""

from __future__ import annotations

import os

for _var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import math  # noqa: E402
import sys  # noqa: E402

from scipy import constants  # noqa: E402


def main(voltages: tuple[float, ...] = (300.0, 600.0)) -> None:
    from profshape.operating_point import OperatingPoint
    from profshape.solver import SolverSettings, demo_device, solve
    from profshape.solver.config import default_profile

    device = demo_device()
    profile = default_profile(device)
    m_xe = 131.293 * constants.atomic_mass - constants.m_e  # IUPAC weight, CODATA constants
    print(f"{'V_d':>5} {'status':>14} {'I_d[A]':>7} {'T[mN]':>7} {'eta_m':>6} {'Te_pk':>6} "
          f"{'eta_v':>6} {'u/umax':>6} {'eta_a':>6} {'phimax/V':>8} {'time[s]':>7}")
    for v in voltages:
        point = OperatingPoint(f"{v:g}V", v, 4.5e-6, "xenon")
        r = solve(device, point, profile, SolverSettings())
        g = r.globals
        if r.status == "failed":
            print(f"{v:5.0f} failed: {r.reason}")
            continue
        v_max = math.sqrt(2 * constants.e * v / m_xe)
        umax = float(r.cells["ion_velocity_m_s"].max()) / v_max
        phimax = float(r.cells["potential_V"].max()) / v
        print(f"{v:5.0f} {r.status:>14} {g['discharge_current_A']:7.3f} "
              f"{1e3 * g['thrust_N']:7.2f} {g['mass_utilization']:6.3f} "
              f"{g['peak_electron_temperature_eV']:6.1f} {g['voltage_utilization']:6.3f} "
              f"{umax:6.3f} {g['anode_efficiency']:6.3f} {phimax:8.3f} "
              f"{g['wall_time_s']:7.2f}")
        if "oscillation_peak_to_peak_A" in g:  # outputs added with issue 11
            print(f"      current utilization {g['current_utilization']:.3f}, anode fall "
                  f"{g['anode_fall_V']:.1f} V, wall ion current {g['wall_ion_current_A']:.2f} A, "
                  f"rms {g['oscillation_relative_amplitude']:.1%}, peak to peak "
                  f"{g['oscillation_peak_to_peak_A']:.3f} A, {g['oscillation_frequency_Hz']:.3g} Hz")
        if "ion_birth_potential_V" in g:  # outputs added after issue 11
            print(f"      charge-exchange share of thrust {1e3 * g['charge_exchange_thrust_N']:.2f} mN, "
                  f"ion birth potential {g['ion_birth_potential_V'] / v:.3f} V_d, ion momentum "
                  f"balance {g['ion_momentum_balance_error']:+.2e}")
        sys.stdout.flush()


if __name__ == "__main__":
    main()
