"""Kill trials: a recording process killed with SIGKILL at random moments leaves a record that
opens, says `unfinished` (never mistaken for a whole run), and holds a contiguous prefix of
the rows, every value exact, with nothing misread after it.

The external guarantee leaned on is SQLite's atomic commit in WAL mode
(https://sqlite.org/wal.html, https://sqlite.org/atomiccommit.html). A bounded number of
trials here; `tools/record_kill_trials.py --trials 100` runs more and prints how many ms
before each kill were lost (no timing is asserted here).
"""

import random
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tools"))
from record_kill_trials import trial  # noqa: E402

_RND = random.Random(20261202)
DELAYS = [round(_RND.uniform(0.05, 1.5), 3) for _ in range(6)]


@pytest.mark.parametrize("kill_after_s", DELAYS)
def test_sigkill_leaves_an_exact_prefix_marked_unfinished(tmp_path, kill_after_s):
    found = trial(tmp_path, rate=1000.0, kill_after_s=kill_after_s)  # asserts exactness inside
    if kill_after_s >= 0.5:
        # the writer commits on its own (every 50 ms): a kill mid-run never leaves nothing
        assert found["rows"] > 0 and found["events"] > 0
