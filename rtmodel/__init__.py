"""rtmodel: the plant. Pure numeric kernels over flat float64 arrays.

Owns: the DC machine in every connection, magnetization, converter and mains, mechanics and
thermal model. Must never import host, serial, file or clock modules: no I/O here, except
the one cache guard below, which runs once at import.

Cache guard: numba's `cache=True` invalidates a compiled function only when its own source
file changes, but the kernels bake in the index constants of rtmodel.layout (and each other's
inlined code). A change to any rtmodel source therefore removes this package's numba cache
files, keyed by a hash of all rtmodel sources, so a stale compiled kernel can never run with
a new array layout.
"""

import hashlib as _hashlib
import os as _os
from pathlib import Path as _Path


def _guard_numba_cache() -> None:
    here = _Path(__file__).resolve().parent
    digest = _hashlib.sha256()
    for src in sorted(here.glob("*.py")):
        digest.update(src.name.encode())
        digest.update(src.read_bytes())
    stamp = digest.hexdigest()[:16]
    dirs = [here / "__pycache__"]
    user_dir = _os.environ.get("NUMBA_CACHE_DIR")
    if user_dir:
        dirs.append(_Path(user_dir))
    for cache in dirs:
        marker = cache / "dcrig-rtmodel.stamp"
        try:
            if marker.exists() and marker.read_text() == stamp:
                continue
            if cache.is_dir():
                for f in list(cache.rglob("*.nbi")) + list(cache.rglob("*.nbc")):
                    if f.name.split(".")[0] in {s.stem for s in here.glob("*.py")}:
                        f.unlink(missing_ok=True)
            cache.mkdir(parents=True, exist_ok=True)
            marker.write_text(stamp)
        except OSError:
            pass  # read-only install: numba then uses its user-wide cache, keyed the same way


_guard_numba_cache()
