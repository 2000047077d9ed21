"""The trial log keeps every trial without rewriting the whole parquet table per trial.

Each finished trial is one fsync-ed journal line; the table is compacted from it now
and then. The exact-resume tests (test_interrupt.py) cover kills at random moments;
these cover the journal itself: how often the table is written, a line cut by a kill,
a damaged line, and reading a log while its table lags the journal.
"""

from __future__ import annotations

import pandas as pd
import pytest

import profshape.trials as trials
from profshape.exceptions import InputDataError
from profshape.executors import InlineExecutor
from profshape.search import SearchSettings, run_search
from profshape.trials import COMPACT_EVERY, TrialLog, journal_path, read_trials
from reliability._faulty import make_problem

BUDGET = 20


@pytest.fixture(scope="module")
def finished_log(tmp_path_factory):
    """A 20-trial search on the cheap problem, counting whole-table writes."""
    log = tmp_path_factory.mktemp("log") / "trials.parquet"
    writes = []
    original = trials.atomic_write_bytes

    def counting(path, writer):
        if str(path).endswith(".parquet"):
            writes.append(path)
        original(path, writer)

    trials.atomic_write_bytes = counting
    try:
        settings = SearchSettings(budget=BUDGET, n_initial=BUDGET, seed=2, num_restarts=2,
                                  raw_samples=32, progress=False)
        run_search(make_problem(), settings, log, executor=InlineExecutor())
    finally:
        trials.atomic_write_bytes = original
    return log, writes


def test_table_is_not_rewritten_per_trial(finished_log):
    log, writes = finished_log
    # the first trial, every COMPACT_EVERY trials, and the end of the search
    assert len(writes) <= 2 + BUDGET // COMPACT_EVERY, len(writes)
    df = pd.read_parquet(log)  # complete once the search ended
    assert list(df["trial"]) == list(range(BUDGET))
    assert journal_path(log).read_text() == ""


def test_journal_rows_on_top_of_a_lagging_table(finished_log, tmp_path):
    log, _ = finished_log
    full = read_trials(log)
    # a table holding the first 5 trials and a journal holding the next 7, the last cut
    new = tmp_path / "trials.parquet"
    part = TrialLog(new, make_problem().names, ("300V", "250V"))
    part._rows = full.iloc[:5].to_dict(orient="records")
    part.compact()
    for row in full.iloc[5:12].to_dict(orient="records"):
        part.append(row)
    part._fh.close()
    part._fh = None
    text = journal_path(new).read_text()
    journal_path(new).write_text(text + text.splitlines()[0][:40])  # a write cut by a kill
    merged = read_trials(new)
    assert list(merged["trial"]) == list(range(12))
    pd.testing.assert_frame_equal(merged[["trial", "status", "reduced_chi2", "error"]],
                                  full.iloc[:12][["trial", "status", "reduced_chi2", "error"]])
    assert merged["started_at"].dtype == full["started_at"].dtype
    # a damaged line in the middle is an error naming the file and line
    lines = text.splitlines()
    journal_path(new).write_text("\n".join([lines[0], "{not json", *lines[1:]]) + "\n")
    with pytest.raises(InputDataError, match=r"trials.parquet.journal.*line 2"):
        read_trials(new)
