"""host.record: the run record (crash-safe SQLite store), run folders, exports (CSV, COMTRADE).

The record is the single source of truth of a run: summaries, verdicts, plots and exports
are read from it, never from live state. Must never import rtmodel or host.link.
"""

from .rundir import new_run_dir, save_configs
from .store import RECORD_FILE, RecordError, RecordReader, RunRecorder, open_record

__all__ = ["RECORD_FILE", "RecordError", "RecordReader", "RunRecorder", "new_run_dir", "open_record", "save_configs"]
