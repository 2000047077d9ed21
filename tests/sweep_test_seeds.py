"""Run the tests that assert a search or sampler outcome under 10 seeds each.

Not collected by pytest (no ``test_`` prefix); run it by hand, one sweep at a time::

    PYTHONPATH=$PWD OMP_NUM_THREADS=1 python tests/sweep_test_seeds.py [--shifts 0-9] [TESTS...]

For shift ``k`` every :class:`~profshape.search.SearchSettings` and
:class:`~profshape.posterior.PosteriorSettings` a test builds gets
``seed + 1000 k`` instead of its ``seed`` (a ``None`` seed stays ``None``), and
so does every explicit ``seed=`` of the draw functions (``DRAWS``): shift 0
is the suite as it runs, shifts 0-9 give each test ten different search and
sampler seeds (the data the tests generate keep their own seeds). Each shift runs in its own
pytest process (session fixtures are rebuilt) and the script prints a table
of pass counts per test. Margins (fraction of the tolerance used) of the
search tests are printed by ``tests/search/sweep_seeds.py``.

The default selection (``DEFAULT``) is every test whose assertion depends on
a search or sampler outcome; ``tests/SEED_SWEEPS.md`` lists them and the last
sweep's figures.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ENV = "PROFSHAPE_TEST_SEED_SHIFT"

#: Tests whose assertions depend on a search or sampler outcome. The two test-function
#: searches and the synthetic-truth calibration are swept with their margins by
#: ``tests/search/sweep_seeds.py`` and left out here (add them by naming them).
DEFAULT = [
    "tests/search/test_engine.py",
    "tests/search/test_composite.py",
    "tests/search/test_trust_region.py",
    "tests/search/test_acquisition.py",
    "tests/posterior",
    "--deselect", "tests/search/test_engine.py::test_branin_within_one_percent",
    "--deselect", "tests/search/test_engine.py::test_hartmann6_within_five_percent",
]


#: Seeds below this are shifted by ``shift * SPAN``; larger ones (already shifted, e.g. by a
#: ``dataclasses.replace`` of shifted settings) are left alone.
SPAN = 1000
#: Functions whose explicit ``seed=`` argument is shifted too, by module.
DRAWS = {
    "profshape.posterior": ("posterior_bands", "predict_scalars"),
    "profshape.posterior.bands": ("emulated_bands",),
    "profshape.posterior.sampler": ("run_ensemble",),
}


def shifted(seed, shift: int):
    """``seed + shift * SPAN`` for a seed below :data:`SPAN`, else ``seed`` (idempotent)."""
    if seed is None or not shift or int(seed) >= SPAN:
        return seed
    return int(seed) + shift * SPAN


class SeedShift:
    """pytest plugin: shift the seeds of the search and the sampler by ``shift``."""

    def __init__(self, shift: int) -> None:
        self.shift = shift
        self.outcomes: dict[str, str] = {}

    def pytest_sessionstart(self, session) -> None:
        """Patch before collection, so test modules import the wrapped functions."""
        if not self.shift:
            return
        import importlib

        from profshape.posterior.settings import PosteriorSettings
        from profshape.search.settings import SearchSettings

        shift = self.shift
        for cls in (SearchSettings, PosteriorSettings):
            original = cls.__post_init__

            def post_init(obj, _original=original):
                object.__setattr__(obj, "seed", shifted(obj.seed, shift))
                _original(obj)

            cls.__post_init__ = post_init  # type: ignore[method-assign]
        for module, names in DRAWS.items():
            mod = importlib.import_module(module)
            for name in names:
                fn = getattr(mod, name, None)
                if fn is None:
                    continue

                def wrapped(*a, _fn=fn, **kw):
                    if "seed" in kw:
                        kw["seed"] = shifted(kw["seed"], shift)
                    return _fn(*a, **kw)

                setattr(mod, name, wrapped)

    def pytest_runtest_logreport(self, report) -> None:
        """Keep each test's worst outcome over setup, call and teardown."""
        if report.outcome != "passed" or report.when == "call":
            if self.outcomes.get(report.nodeid, "passed") == "passed":
                self.outcomes[report.nodeid] = report.outcome


def _child(shift: int, tests: list[str]) -> None:
    import pytest

    plugin = SeedShift(shift)
    pytest.main(["-q", "-p", "no:cacheprovider", *tests], plugins=[plugin])
    print("@@" + json.dumps(plugin.outcomes), flush=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--shifts", default="0-9")
    ap.add_argument("--child", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("tests", nargs="*")
    args, extra = ap.parse_known_args()
    given = [*args.tests, *extra]  # test paths and pytest options
    if args.child is not None:
        _child(args.child, given or DEFAULT)
        return
    lo, _, hi = args.shifts.partition("-")
    shifts = range(int(lo), int(hi or lo) + 1)
    table: dict[str, list[str]] = {}
    for k in shifts:
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, __file__, "--child", str(k), "--", *given],
                             capture_output=True, text=True, cwd=ROOT, env=os.environ.copy())
        line = [x for x in out.stdout.splitlines() if x.startswith("@@")]
        res = json.loads(line[-1][2:]) if line else {}
        fails = sorted(t for t, o in res.items() if o != "passed")
        print(f"shift {k}: {len(res) - len(fails)}/{len(res)} pass "
              f"({time.perf_counter() - t0:.0f} s){' FAILED: ' + ', '.join(fails) if fails else ''}",
              flush=True)
        for t, o in res.items():
            table.setdefault(t, []).append("." if o == "passed" else "F")
    print("\nper test (one mark per shift, F = failed):")
    for t in sorted(table):
        marks = "".join(table[t])
        print(f"{marks.count('.'):>2}/{len(marks)} {marks}  {t}")


if __name__ == "__main__":
    main()
