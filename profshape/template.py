"""``profshape init``: a commented calibration-file template to fill in.

:func:`calibration_template` returns the text; :func:`write_template` writes it
without overwriting an existing file. Two variants: ``"builtin"`` (the
built-in 1-D solver, with a ``[device]`` table) and ``"external"`` (your own
program through the external adapter). Every key the calibration file
accepts appears, set to its default or commented out with what it does; the
template parses as it is (tests check both), and only the data file names and
the device need your values.
"""

from __future__ import annotations

from pathlib import Path

from .exceptions import InputDataError

__all__ = ["TEMPLATE_KINDS", "calibration_template", "write_template"]

TEMPLATE_KINDS = ("builtin", "external")

_HEAD = '''# profshape calibration file (TOML). Run it with:  profshape calibrate THIS_FILE --out run1
# Relative paths are taken from this file's folder. SI units throughout (names end in the unit).
title = "my thruster, two voltages"

# ---------------------------------------------------------------- the data
# Either [[operating_points]] tables (below) or a data-set folder with operating_points,
# ion_velocity and scalars tables (CSV or parquet):
# data_folder = "data"

[[operating_points]]
label = "300V"
discharge_voltage_V = 300.0
anode_mass_flow_kg_s = 4.5e-6
propellant = "xenon"              # "xenon", "krypton", "argon" (names or symbols)
magnetic_field_scale = 1.0        # multiplies the device's field at this point
# background_pressure_Pa = 0.0    # facility background pressure [Pa]; 0 = space (default)
# background_temperature_K = 300.0   # its gas temperature [K]
ion_velocity_file = "lif_300V.csv"   # columns z_m, ion_velocity_m_s, sigma_ion_velocity_m_s[, sigma_z_m]
# measured scalars (optional): value, sigma, unit (SI)
scalars.discharge_current = { value = 5.5, sigma = 0.1, unit = "A" }
# scalars.thrust = { value = 0.087, sigma = 0.002, unit = "N" }

[[operating_points]]
label = "250V"
discharge_voltage_V = 250.0
anode_mass_flow_kg_s = 4.5e-6
ion_velocity_file = "lif_250V.csv"
'''

_DEVICE = '''
# ------------------------------------------------------ the built-in solver's device
[device]                          # geometry [m]; or `preset = "demo"` alone for the demo device
name = "my-thruster"
channel_length_m = 0.024
inner_radius_m = 0.032
outer_radius_m = 0.044
domain_length_m = 0.06            # anode to cathode plane
anode_temperature_K = 500.0       # sets the neutral drift speed
cathode_electron_temperature_eV = 2.5

[device.magnetic_field]           # bell-shaped radial field; or z_m = [...], B_T = [...] (a table)
peak_T = 0.017
peak_z_m = 0.024
width_upstream_m = 0.011
width_downstream_m = 0.014
'''

_SHAPE = '''
# ------------------------------------------------------------ the shape family
[shape]
family = "smooth_step"            # smooth_step | log_spline | log_well | scaled_reference
options = {}                      # e.g. { n_nodes = 5, free_nodes = true } for log_spline,
                                  # { reference_file = "ref.csv" } for scaled_reference
bounds = {}                       # e.g. { transition_z_m = [0.018, 0.032] } to narrow a coefficient

# [[shape.start]]                 # starting shapes (e.g. your hand-tuned one), logged "user"
# log10_inner_level = -2.5
# log10_outer_level = -1.0
# transition_z_m = 0.025
# transition_width_m = 0.002
'''

_FORWARD_BUILTIN = '''
# ----------------------------------------------------------------- the forward model
[forward_model]
kind = "builtin"                  # the built-in 1-D solver (needs [device])
cache = true                      # result cache keyed by coefficients, point and model version

[forward_model.solver]            # any field of profshape.solver.SolverSettings
n_cells = 160
# for your own program instead (see `profshape init --external`):
# kind = "external"
# command = ["./my_code", "--input", "{input}"]
# timeout_s = 600.0
# retries = 0
# grid_points = 251
# grid_z_m = [0.0, 0.0625]
# version = "0"
'''

_FORWARD_EXTERNAL = '''
# ----------------------------------------------------------------- the forward model
[forward_model]
kind = "external"                 # your program, once per operating point and trial
command = ["./my_code", "--input", "{input}"]   # an argument list, never a shell string;
                                  # {input} = path of input.json, {workdir} = the run's folder
timeout_s = 600.0                 # a run past this is killed (its whole process tree)
retries = 0                       # re-runs of a failed run before it counts as failed
grid_points = 251                 # points of the profile.csv written for the program
# grid_z_m = [0.0, 0.0625]        # its range [m]; default: [device] domain, else [0, 0.0625]
version = "0"                     # your code's version: part of the cache key
cache = true
# solver = {}                     # (built-in solver settings; unused here)
'''

_TAIL = '''
# ----------------------------------------------------------------- the likelihood
[likelihood]
discrepancy_sigma_m_s = 0.0       # model discrepancy added in quadrature [m/s]
# fit_discrepancy_m_s = [10.0, 2000.0]   # fit it instead (log10-uniform prior in these bounds)
scalar_discrepancy_relative = 0.0 # relative discrepancy of the scalars
use_position_uncertainty = true   # propagate sigma_z_m through the model's slope
free_scale_per_point = false      # one extra log10 profile scale per operating point
scale_bounds_log10 = [-1.0, 1.0]  # bounds of those scales
weights = {}                      # per observable or "label/observable", e.g. { thrust = 1.0 }
discrepancy = {}                  # per observable: profiles in their SI unit, scalars relative,
                                  # e.g. { plasma_potential = 5.0, thrust = 0.03 }

# ------------------------------------------- coefficients that vary with the point
# [closure]                       # without features: one profile for all points
# features = [{ field = "background_pressure_Pa", transform = "log10", floor = 1e-5 },
#             { field = "discharge_voltage_V" }]   # numeric operating-point fields
# coefficients = ["transition_z_m"]               # those that get slopes (default: all)
# slope_bounds = { transition_z_m = [-0.004, 0.004] }   # by coefficient or slope name
# intercept_bounds = { transition_z_m = [0.02, 0.032] } # the coefficient mid-range

# --------------------------------------------------------------------- the search
[search]
budget = 40                       # forward-model trials in all
batch_size = 1                    # proposals per round (batch noisy EI when > 1)
# n_initial = 9                   # Sobol initial design (default 2 d + 1)
seed = 0
# target_reduced_chi2 = 1.0       # stop at the noise floor
# patience = 20                   # stop after this many trials without improvement
# stop_after_failures = 10        # stop after this many trials in a row failed for the same reason
# strategy = "trust_region"       # default; "global" or "hybrid"
# trust_region_warmup = 12        # global trials before the trust region (default from d)
# num_restarts = 8                # acquisition optimiser restarts
# raw_samples = 256               # acquisition optimiser raw samples

# ----------------------------------------------------------------- where runs go
[workers]
kind = "local"                    # "local" (this machine) | "slurm" | "pbs" (dask-jobqueue)
n_workers = 1                     # local processes (kind = "local")
# scheduler_address = "tcp://scheduler:8786"   # a running dask scheduler instead (kind = "local")
# for kind = "slurm" / "pbs": jobs x cores single-threaded workers
jobs = 1                          # batch jobs kept running (a pre-empted job is replaced)
cores = 1                         # cores per job
memory = "4GB"                    # memory per job
walltime = "01:00:00"             # per job; workers retire 5 min before it
# queue = "normal"                # partition / queue
# account = "my-project"
job_directives = []               # extra job-script header options, e.g. ["--constraint=cpu"]
# python = "/path/to/venv/bin/python"   # interpreter the jobs start (default: this one)

# ------------------------------------------------------------------ the posterior
[posterior]
enabled = true
# n_walkers = 32                  # ensemble sampler walkers
# n_steps = 10000                 # most steps per walker (chains stop on the autocorrelation rule)
# burn_in = 500                   # steps dropped
# thin = 1
# n_gp_draws = 8                  # Gaussian-process realisations sampled (0: the GP mean only)
# n_refine_rounds = 3             # rounds of forward runs where the posterior mass sits
# n_refine_draws = 16             # forward runs per refinement round
# n_check_draws = 16              # posterior draws re-run for the predictive check
# forward_budget = 32             # most forward runs of the posterior sampling (refinement, MAP, check)
# refine_threshold_nats = 1.0     # refine until the emulator's log-likelihood error is below this
n_band_draws = 24                 # posterior draws run for the bands and predictions
band_levels = [0.68, 0.95]
# seed = 0                        # default: the search's seed

# [[posterior.predict]]           # predictions away from the data (flagged as extrapolation)
# label = "350V"
# discharge_voltage_V = 350.0
# anode_mass_flow_kg_s = 4.5e-6

# ---------------------------------------------- a reference profile to compare with
# [reference]
# file = "hand_tuned.csv"         # columns z_m [m], value
# quantity = "bohm"               # "bohm" (Bohm-like coefficient) or "frequency" [1/s]
# label = "hand-tuned"

# --------------------------------------------------------------------- the outputs
[output]
# folder = "run"                  # default output folder (--out overrides)
figures = ["png", "svg"]
'''


def calibration_template(model: str = "builtin") -> str:
    """The template text for the built-in solver or an external program.

    Raises
    ------
    InputDataError
        If ``model`` is not ``"builtin"`` or ``"external"``.
    """
    if model not in TEMPLATE_KINDS:
        raise InputDataError(f"init: model must be one of {list(TEMPLATE_KINDS)}; got {model!r}.")
    if model == "builtin":
        return _HEAD + _DEVICE + _SHAPE + _FORWARD_BUILTIN + _TAIL
    device = ("\n# [device] is optional for an external program; give one to have profile bands and\n"
              "# exports in both the Bohm-like coefficient and the frequency (it carries the field).\n")
    return _HEAD + device + _SHAPE + _FORWARD_EXTERNAL + _TAIL


def write_template(path: str | Path, model: str = "builtin", force: bool = False) -> Path:
    """Write the template to ``path`` (refusing to overwrite unless ``force``).

    Raises
    ------
    InputDataError
        If the file exists and ``force`` is False, or the folder is not writable.
    """
    path = Path(path)
    if path.exists() and not force:
        raise InputDataError(f"init: {path} exists; choose another name or pass --force.")
    text = calibration_template(model)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputDataError(f"init: cannot write {path} ({exc.strerror}).") from None
    return path
