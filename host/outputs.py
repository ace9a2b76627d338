"""Output paths checked before a run starts, so a long run never ends in a traceback.

Owns: the rules an output file or folder must pass before any model work is done (parent
exists and is a folder, the path is not a folder when a file is wanted, the place can really
be written). Writability is probed by creating and removing a temporary file, because
os.access() says yes to root on read-only places such as /proc. Nothing is left behind and
nothing existing is touched. Imports nothing of rtmodel.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import ConfigError


def _probe_writable(folder: Path) -> str | None:
    """None when a file can be created in folder, else the reason."""
    try:
        fd, name = tempfile.mkstemp(prefix=".dcrig-probe-", dir=folder)
    except OSError as err:
        return err.strerror or str(err)
    os.close(fd)
    try:
        os.unlink(name)
    except OSError:
        pass
    return None


def _nearest_existing(path: Path) -> Path:
    p = path
    while not p.exists() and p != p.parent:
        p = p.parent
    return p


def check_output_file(option: str, path: str | os.PathLike, suffix: str | None = None) -> Path:
    """An output file: its folder must exist and be writable, and it must not be a folder."""
    p = Path(path)
    if suffix and p.suffix.lower() != suffix:
        raise ConfigError(f"{option}: {p}: expected a file name ending in {suffix}")
    if p.is_dir():
        raise ConfigError(f"{option}: {p}: is a folder, expected a file name")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.exists():
        base = _nearest_existing(parent)
        if base.exists() and not base.is_dir():
            raise ConfigError(f"{option}: {p}: {base} is a file, not a folder")
        raise ConfigError(f"{option}: {p}: folder {parent} does not exist")
    if not parent.is_dir():
        raise ConfigError(f"{option}: {p}: {parent} is a file, not a folder")
    why = _probe_writable(parent)
    if why:
        raise ConfigError(f"{option}: {p}: cannot write in {parent} ({why})")
    return p


def check_output_dir(option: str, path: str | os.PathLike) -> Path:
    """An output folder: an existing folder that can be written, or one that can be created
    (its nearest existing ancestor is a writable folder). Creates nothing."""
    p = Path(path)
    if p.exists():
        if not p.is_dir():
            raise ConfigError(f"{option}: {p}: exists and is not a folder")
        why = _probe_writable(p)
        if why:
            raise ConfigError(f"{option}: {p}: cannot write in it ({why})")
        return p
    base = _nearest_existing(p.parent if str(p.parent) else Path("."))
    if not base.is_dir():
        raise ConfigError(f"{option}: {p}: {base} is a file, not a folder")
    why = _probe_writable(base)
    if why:
        raise ConfigError(f"{option}: {p}: cannot create it in {base} ({why})")
    return p
