"""Run folders: one per run, never overwritten; the resolved configs as run, with their hashes.

A run folder holds record.sqlite (host.record.store), configs/*.toml (every config the run
used, resolved: defaults filled in and --set overrides applied) and the exports (frames.csv,
events.csv, run.png, COMTRADE files). Imports no rtmodel.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

from ..errors import ConfigError

MAX_SUFFIX = 10000


def new_run_dir(base, name: str, option: str = "--out") -> Path:
    """Create and return base/name, or base/name-2, name-3, ... when taken.

    mkdir without exist_ok is the exclusive step: two runs started at the same instant get two
    folders. A base that cannot hold folders is refused before the run starts (one line,
    naming `option`), so no run computes for nothing.
    """
    base = Path(base)
    if not name or "/" in name or name in (".", ".."):
        raise ConfigError(f"{option}: {name!r}: a run folder name must be a plain name")
    try:
        base.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError) as err:
        raise ConfigError(f"{option}: {base}: cannot create the run folder here (a file is in the way)") from err
    except OSError as err:
        raise ConfigError(f"{option}: {base}: cannot create the run folder here ({err.strerror})") from err
    for k in range(1, MAX_SUFFIX):
        cand = base / (name if k == 1 else f"{name}-{k}")
        try:
            cand.mkdir()
        except FileExistsError:
            continue
        except OSError as err:
            raise ConfigError(f"{option}: {cand}: cannot create the run folder ({err.strerror})") from err
        return cand
    raise ConfigError(f"{option}: {base / name}: {MAX_SUFFIX} run folders of this name exist already")


def discard_if_empty(run_dir) -> None:
    """Remove a run folder that never got a record (the link would not open, say), so a
    failed start leaves no empty folder behind. Anything inside keeps the folder."""
    try:
        Path(run_dir).rmdir()
    except OSError:
        pass


def config_toml(values: dict) -> str:
    """A flat 'section.key' -> value dict as TOML text (tomli-w writes it: a well-kept writer
    rather than our own quoting). Keys whose value is None (unset optional keys) have no TOML
    form; they are listed in a comment so the copy says what was left unset."""
    import tomli_w

    nested: dict = {}
    unset = []
    for path, value in values.items():
        if value is None:
            unset.append(path)
            continue
        node = nested
        parts = path.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = value
    text = tomli_w.dumps(nested)
    if unset:
        text = "# unset (no value): " + ", ".join(unset) + "\n" + text
    return text


def write_atomic(path: Path, data: str | bytes) -> None:
    """Write a file whole or not at all: a temporary file in the same folder, then rename.
    An interrupt mid-write leaves the old file or none, never a cut one."""
    path = Path(path)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix="." + path.name + ".", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, mode) as fh:
            fh.write(data)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


class AtomicTextFile:
    """A text file written through a temporary file and renamed into place on success, so a
    long export (millions of CSV rows) streams to disk and is still whole or absent."""

    def __init__(self, path):
        self.path = Path(path)
        fd, self._tmp = tempfile.mkstemp(prefix="." + self.path.name + ".", suffix=".tmp", dir=self.path.parent)
        self.fh = os.fdopen(fd, "w", newline="")

    def __enter__(self):
        return self.fh

    def __exit__(self, exc_type, exc, tb):
        self.fh.close()
        if exc_type is None:
            os.replace(self._tmp, self.path)
        else:
            try:
                os.unlink(self._tmp)
            except OSError:
                pass
        return False


def save_configs(run_dir, configs: dict) -> dict:
    """Write each resolved config as run_dir/configs/<name>.toml; return meta entries:
    {name: {"source": file, "sha256": hash of the written TOML, "values": resolved values}}.

    configs maps a name ("machine", "converter", "controller") to a host.config.Config
    (`.values`), a controller Settings (`.as_dict()`), or a plain flat dict.
    """
    out = {}
    folder = Path(run_dir) / "configs"
    folder.mkdir(exist_ok=True)
    for name, cfg in configs.items():
        if cfg is None:
            continue
        if isinstance(cfg, dict):
            values = dict(cfg)
        elif hasattr(cfg, "as_dict"):  # controller Settings
            values = cfg.as_dict()
        else:  # host.config.Config
            values = dict(cfg.values)
        source = getattr(cfg, "source", None)
        text = config_toml(values)
        if source:
            text = f"# resolved from {source} (defaults filled in, overrides applied)\n" + text
        write_atomic(folder / f"{name}.toml", text)
        out[name] = {"source": str(source) if source else None,
                     "sha256": hashlib.sha256(text.encode()).hexdigest(),
                     "values": values}
    return out
