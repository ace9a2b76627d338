"""dcrig installed outside the checkout: build the wheel, install it into a fresh virtual
environment in a temporary folder, and run the installed `dcrig` there (no checkout on the path).

Offline and quick: the wheel is built without build isolation by the running interpreter's
setuptools (a test extra, >= 70.1, which builds wheels by itself), and installed with
--no-deps; the dependencies (numpy, numba, pyserial, matplotlib) are made visible to the new
environment by a .pth file naming the running interpreter's site-packages. A .pth line only
appends a folder to sys.path (the .pth files inside it, such as an editable install's finder,
are not run), so `host` and `rtmodel` can come only from the wheel.
"""

from __future__ import annotations

import os
import shutil
import site
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TIMEOUT_S = 300
# what a copy of the source tree leaves out: environments, build output, caches, run output
_SKIP = shutil.ignore_patterns(".git", ".venv", "build", "dist", "*.egg-info", "__pycache__",
                               ".pytest_cache", "dcrig-demo", "dcrig-serve", "firing-ramps")


def _run(cmd, cwd, env=None, timeout=TIMEOUT_S):
    p = subprocess.run([str(c) for c in cmd], cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)
    return p


def _clean_env(venv: Path) -> dict:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV")}
    env["PATH"] = f"{venv / 'bin'}{os.pathsep}/usr/bin{os.pathsep}/bin"
    env["NUMBA_CACHE_DIR"] = str(venv / "numba-cache")  # nothing written into the checkout
    return env


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """(venv, wheel path, folder outside the checkout) with the freshly built wheel installed."""
    base = tmp_path_factory.mktemp("wheel")
    src = base / "src"
    shutil.copytree(ROOT, src, symlinks=True, ignore=_SKIP)  # keeps host/_configs a symlink
    wheels = base / "wheels"
    p = _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "--no-index",
              "-q", "-w", wheels, src], cwd=base)
    assert p.returncode == 0, p.stdout + p.stderr
    (wheel,) = wheels.glob("dcrig-*.whl")
    venv = base / "venv"
    p = _run([sys.executable, "-m", "venv", "--without-pip", venv], cwd=base)
    assert p.returncode == 0, p.stderr
    vpy = venv / "bin" / "python"
    purelib = Path(_run([vpy, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"], cwd=base)
                   .stdout.strip())
    deps = [d for d in site.getsitepackages() if Path(d).is_dir()]
    (purelib / "zz_dcrig_test_deps.pth").write_text("\n".join(deps) + "\n")
    p = _run([sys.executable, "-m", "pip", "--python", vpy, "install", "--no-deps", "--no-index", "-q", wheel],
             cwd=base)
    assert p.returncode == 0, p.stdout + p.stderr
    away = base / "elsewhere"
    away.mkdir()
    return venv, wheel, away


def test_the_wheel_holds_every_module_and_the_demo_plant(installed):
    _venv, wheel, _away = installed
    names = set(zipfile.ZipFile(wheel).namelist())
    modules = {str(p.relative_to(ROOT)) for pkg in ("host", "rtmodel") for p in (ROOT / pkg).rglob("*.py")
               if "_configs" not in p.parts}
    assert modules and modules <= names, sorted(modules - names)
    configs = {f"host/_configs/{p.relative_to(ROOT / 'configs')}" for p in (ROOT / "configs").rglob("*")
               if p.is_file()}
    assert configs and configs <= names, sorted(configs - names)
    # the configs are data, not importable packages of their own
    assert not any(n.startswith("host/_configs/") and n.endswith("__init__.py") for n in names)


def test_the_installed_dcrig_runs_outside_the_checkout(installed):
    venv, _wheel, away = installed
    env = _clean_env(venv)
    vpy = venv / "bin" / "python"
    # every module imports from the installed copy, none from the checkout
    p = _run([vpy, "-c", "import importlib, pkgutil, host, rtmodel\n"
              "for pkg in (host, rtmodel):\n"
              "    for m in pkgutil.walk_packages(pkg.__path__, pkg.__name__ + '.'):\n"
              "        importlib.import_module(m.name)\n"
              "print(host.__file__); print(rtmodel.__file__)"], cwd=away, env=env)
    assert p.returncode == 0, p.stderr
    for line in p.stdout.split():
        assert Path(line).is_relative_to(venv), p.stdout

    p = _run([venv / "bin" / "dcrig", "--help"], cwd=away, env=env)
    assert p.returncode == 0, p.stderr
    assert "steady" in p.stdout and "qualified person" in " ".join(p.stdout.split())

    p = _run([venv / "bin" / "dcrig", "demo", "--help"], cwd=away, env=env)  # says where the demo plant is
    assert p.returncode == 0 and str(venv) in p.stdout, p.stdout + p.stderr

    p = _run([vpy, "-c", "from host.shipped import shipped_config as s\n"
              "print(s('machines/kestrel_f3_stand.toml')); print(s('converters/kestrel_f3_bridge.toml'))"],
             cwd=away, env=env)
    assert p.returncode == 0, p.stderr
    machine, converter = p.stdout.split()
    assert Path(machine).is_relative_to(venv) and Path(converter).is_relative_to(venv), p.stdout

    p = _run([venv / "bin" / "dcrig", "check", machine, "--converter", converter], cwd=away, env=env)
    assert p.returncode == 0, p.stderr
    assert "kestrel_f3_stand" in p.stdout and "- valid" in p.stdout and "firing angle at rated duty" in p.stdout

    # a name that is not shipped: one line naming it, exit 2
    p = _run([vpy, "-c", "import sys\nfrom host.errors import ConfigError\nfrom host.shipped import shipped_config\n"
              "try:\n    shipped_config('machines/harbour_crane.toml')\n"
              "except ConfigError as err:\n    print(f'error: {err}', file=sys.stderr); sys.exit(2)"],
             cwd=away, env=env)
    assert p.returncode == 2 and p.stderr.startswith("error: machines/harbour_crane.toml: "), p.stderr
