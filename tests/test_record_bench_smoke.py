"""tools/bench_record.py and tools/record_kill_trials.py run in quick mode and print their
tables and verdict lines (numbers are read by people, never asserted: project rule)."""

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _run(*args, timeout=300):
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run([sys.executable, *map(str, args)], cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=timeout)


def test_bench_record_quick_prints_its_tables(kernel):
    p = _run(ROOT / "tools" / "bench_record.py", "--quick", "--frames", "60", "--pairs", "1")
    assert p.returncode == 0, p.stderr
    for head in ("| store | sync |", "| offered rows/s |", "| run | recording |"):
        assert head in p.stdout, head
    assert "SQLite WAL, blob per block" in p.stdout and "append-only raw file" in p.stdout
    assert "target at most +10 us on the p99:" in p.stdout


def test_kill_trials_script_reports_and_refuses_bad_options(tmp_path):
    p = _run(ROOT / "tools" / "record_kill_trials.py", "--trials", "2")
    assert p.returncode == 0, p.stdout + p.stderr
    assert p.stdout.count("| ok |") == 2 and "wrong records 0" in p.stdout
    bad = _run(ROOT / "tools" / "record_kill_trials.py", "--trials", "0")
    assert bad.returncode == 2 and bad.stderr.strip().startswith("error: ")
