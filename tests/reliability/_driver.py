"""Subprocess driver of the interruption tests: one run_search on the cheap problem.

``python _driver.py LOG_PATH SEED BUDGET SLEEP_S EXECUTOR [--resume]``, EXECUTOR
``inline`` or ``pool`` (a 2-worker process pool). Prints ``ready`` once imports are
done, then a JSON summary line when the search ends. With the environment variable
``PROFSHAPE_TEST_WRITE_FLAG`` set to a path, every atomic write of the trial log or
its sidecar pauses for 2 s after the temporary file is written and before it
replaces the old file, after creating that path: a test can then kill the process
in the middle of a log write.
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def _slow_writes(flag: Path) -> None:
    import profshape.trials as trials

    original = trials.atomic_write_bytes

    def paused(path, writer):
        def write_then_pause(tmp):
            writer(tmp)
            flag.write_text(str(path))
            time.sleep(2.0)

        original(path, write_then_pause)

    trials.atomic_write_bytes = paused


def main(argv: list[str]) -> int:
    import torch

    torch.set_num_threads(1)
    from profshape.executors import InlineExecutor, local_executor
    from profshape.search import SearchSettings, run_search
    from reliability._faulty import FaultyFunction, make_problem

    log, seed, budget, sleep_s, kind = argv[1], int(argv[2]), int(argv[3]), float(argv[4]), argv[5]
    resume = "--resume" in argv
    if os.environ.get("PROFSHAPE_TEST_WRITE_FLAG"):
        _slow_writes(Path(os.environ["PROFSHAPE_TEST_WRITE_FLAG"]))
    problem = make_problem(FaultyFunction(rate=0.1, kinds=("raise", "nan"), sleep_s=sleep_s))
    settings = SearchSettings(budget=budget, batch_size=2, n_initial=6, seed=seed,
                              num_restarts=2, raw_samples=64, progress=False)
    executor = InlineExecutor() if kind == "inline" else local_executor(2)
    print("ready", flush=True)
    try:
        result = run_search(problem, settings, log, executor=executor, resume=resume)
    except KeyboardInterrupt:
        print("interrupted", flush=True)
        return 130
    finally:
        executor.shutdown(wait=True, cancel_futures=True)
    print(json.dumps({"best_trial": result.best_trial, "best": result.best_reduced_chi2,
                      "n_trials": result.n_trials, "n_failed": result.n_failed,
                      "coefficients": result.best_coefficients}), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
