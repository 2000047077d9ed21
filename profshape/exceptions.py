"""Error and warning classes of profshape.

Every error raised for bad input derives from :class:`InputDataError`, itself a
:class:`ValueError`, so callers may catch either; its message names the key or field,
the value received and the fix. Every warning derives from :class:`ProfshapeWarning`.
All of profshape's public error and warning classes live here (private control-flow
exceptions of one module stay in that module).
"""

from __future__ import annotations

__all__ = [
    "BoundWarning",
    "CampaignFailedError",
    "ConfigError",
    "ConvergenceWarning",
    "FlatObjectiveWarning",
    "FolderLockedError",
    "ForwardModelError",
    "ImplausibleValueWarning",
    "InputDataError",
    "ModelOutputError",
    "PosteriorCheckWarning",
    "ProfshapeError",
    "ProfshapeWarning",
]


class ProfshapeError(Exception):
    """Base class of all profshape errors."""


class InputDataError(ProfshapeError, ValueError):
    """Bad input: data file, coefficient vector, bound or setting.

    The message names the field (and file, row and column where there is one),
    the value received and how to fix it.
    """


class ConfigError(InputDataError):
    """Bad calibration file or settings (unknown key, wrong type, missing file)."""


class ForwardModelError(ProfshapeError):
    """A forward model could not be set up (not raised for a failed trial).

    A trial that fails is recorded as a failed result with a reason; this error
    is for problems that make every trial impossible, such as a missing
    executable.
    """


class ModelOutputError(ProfshapeError, ValueError):
    """A forward model's output cannot be used (too large, not valid JSON, a file name
    outside its work folder, a non-finite value fed to a fit).

    Caught where a trial is run and recorded as that trial's failure reason; the
    message names the file or quantity and what is wrong with it.
    """


class ProfshapeWarning(UserWarning):
    """Base class of profshape warnings."""


class ConvergenceWarning(ProfshapeWarning):
    """A solver, fit or sampler did not meet its convergence test."""


class CampaignFailedError(ProfshapeError):
    """A calibration ran but produced no usable result (every trial failed, or the
    posterior could not be computed). Raised after the summary and report are written."""


class FlatObjectiveWarning(ProfshapeWarning):
    """Every successful trial gave the same misfit: the coefficients change nothing."""


class ImplausibleValueWarning(ProfshapeWarning):
    """An input value lies outside the physical range stated for it (likely a unit slip)."""


class FolderLockedError(InputDataError):
    """Another process is writing to this output folder (the message names it)."""


class PosteriorCheckWarning(ConvergenceWarning):
    """The surrogate posterior disagrees with forward runs of its own draws."""


class BoundWarning(ProfshapeWarning):
    """A best-fit coefficient sits on (within 1 % of) a bound of its search range.

    The best fit may lie beyond it: widen that bound and search again (the
    message names the coefficient, the side and the bound's value).
    """
