"""Packaging: the wheel holds every sub-package and the shipped rule sets, and runs installed.

pyproject.toml lists the packages explicitly (the import package `zeckenum` is built from two
folders, enumerate/ and cluster/, which setuptools' discovery cannot map), so a new
sub-package that is not listed would be missing from the wheel while every test run from
the checkout still passes.  These tests look at the folders on disk (common practice: a
folder with an __init__.py is a package), at pyproject.toml, and at a wheel built from a copy
of the sources, installed into a fresh virtual environment and run from a folder outside
the checkout.  The count it prints is compared with the brute force of tests/support
(`bruteforce.census`), which shares no code with the engine.
"""

from __future__ import annotations

import json
import os
import shutil
import site
import subprocess
import sys
import zipfile
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

import bruteforce as bf
import pytest

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

REPO = Path(__file__).resolve().parents[1]
ROOTS = {"zeckenum": REPO / "enumerate", "zeckenum.cluster": REPO / "cluster"}
"""Import package -> source folder (as package-dir maps them in pyproject.toml)."""
RULESETS = REPO / "enumerate" / "rules" / "rulesets"
SKIP = shutil.ignore_patterns("__pycache__", "*.pyc", "*.nbi", "*.nbc")


def pyproject() -> dict:
    return tomllib.loads((REPO / "pyproject.toml").read_text())


def packages_on_disk() -> dict[str, Path]:
    """Every package under the source roots (dotted name -> folder): folders holding an
    __init__.py, reached through folders that are packages themselves."""
    out: dict[str, Path] = {}
    for name, root in ROOTS.items():
        for init in sorted(root.rglob("__init__.py")):
            folder = init.parent
            rel = folder.relative_to(root).parts
            if any(part == "__pycache__" for part in rel):
                continue
            if all((root.joinpath(*rel[:i]) / "__init__.py").is_file() for i in range(len(rel))):
                out[".".join((name, *rel))] = folder
    return out


def wheel_path(package: str) -> str:
    """The folder of `package` inside the wheel (zeckenum.core -> zeckenum/core)."""
    return package.replace(".", "/")


def test_pyproject_lists_every_package() -> None:
    tool = pyproject()["tool"]["setuptools"]
    assert tool["package-dir"] == {"zeckenum": "enumerate", "zeckenum.cluster": "cluster"}
    on_disk = packages_on_disk()
    assert {"zeckenum", "zeckenum.cluster", "zeckenum.rules", "zeckenum.core"} <= set(on_disk)
    listed = set(tool["packages"])
    assert sorted(set(on_disk) - listed) == [], "sub-packages missing from pyproject packages"
    assert sorted(listed - set(on_disk)) == [], "pyproject lists packages that do not exist"
    assert tool["package-data"]["zeckenum.rules"] == ["rulesets/*.toml"]
    assert sorted(RULESETS.glob("*.toml")), "no shipped rule set found"


def _build_requirement_met() -> bool:
    """True when this environment's setuptools meets pyproject's build requirement, so the
    wheel can be built without build isolation (no package index needed)."""
    requires = pyproject()["build-system"]["requires"]
    wanted = [r for r in requires if r.replace(" ", "").startswith("setuptools>=")]
    if len(requires) != 1 or len(wanted) != 1:
        return False
    try:
        have = version("setuptools")
    except PackageNotFoundError:
        return False

    def key(text: str) -> tuple[int, ...]:
        return tuple(int(p) for p in text.split(".")[:3] if p.isdigit())

    return key(have) >= key(wanted[0].split(">=", 1)[1].strip())


def _run(cmd: list[str], cwd: Path, env: dict[str, str], timeout: float) -> str:
    out = subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True,
                         timeout=timeout, stdin=subprocess.DEVNULL)
    assert out.returncode == 0, f"{' '.join(cmd)} failed ({out.returncode}):\n" + (
        out.stdout[-3000:] + out.stderr[-3000:])
    return out.stdout


@pytest.mark.slow
def test_wheel_installs_and_runs_outside_the_checkout(tmp_path: Path) -> None:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env.update(PYTHONNOUSERSITE="1", PIP_NO_INPUT="1",
               ZECKENUM_NUMBA_CACHE=str(tmp_path / "numba-cache"))
    # A copy of what the build reads, so no build/ or egg-info folder of the checkout (stale
    # or not) can put a file into the wheel, and the checkout is left untouched.
    src = tmp_path / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(REPO / name, src / name)
    for folder in ROOTS.values():
        shutil.copytree(folder, src / folder.name, ignore=SKIP)
    dist = tmp_path / "dist"
    cmd = [sys.executable, "-m", "pip", "wheel", "--no-deps", "-w", str(dist), str(src)]
    if _build_requirement_met():
        cmd.insert(4, "--no-build-isolation")  # offline: this environment's setuptools
    _run(cmd, tmp_path, env, timeout=600)
    wheels = sorted(dist.glob("zeckenum-*.whl"))
    assert len(wheels) == 1, wheels

    with zipfile.ZipFile(wheels[0]) as zf:
        names = set(zf.namelist())
        entry_points = next(
            zf.read(n).decode() for n in names if n.endswith(".dist-info/entry_points.txt")
        )
    for package, folder in packages_on_disk().items():
        for module in sorted(folder.glob("*.py")):
            assert f"{wheel_path(package)}/{module.name}" in names, (package, module.name)
    tomls = sorted(RULESETS.glob("*.toml"))
    assert tomls
    for path in tomls:
        assert f"zeckenum/rules/rulesets/{path.name}" in names, path.name
    assert not any(n.startswith(("enumerate/", "cluster/", "tests/")) for n in names)
    assert "zeckenum = zeckenum.cli:main" in entry_points

    # A fresh environment that sees the dependencies (numba, numpy, click, ...) of the
    # environment running this test and holds zeckenum from the wheel only.  When that
    # environment is itself a venv, --system-site-packages would only reach the base
    # interpreter (which may lack them), so its site folders are listed in a .pth file: they
    # come after the new venv's own site-packages, so the wheel's zeckenum is found first
    # (checked below).
    venv = tmp_path / "venv"
    _run([sys.executable, "-m", "venv", "--system-site-packages", "--without-pip", str(venv)],
         tmp_path, env, timeout=300)
    python = venv / ("Scripts/python.exe" if os.name == "nt" else "bin/python")
    purelib = _run([str(python), "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"],
                   tmp_path, env, timeout=300).strip()
    ours = [p for p in site.getsitepackages() if Path(p).is_dir()]
    (Path(purelib) / "zeckenum-test-deps.pth").write_text("".join(f"{p}\n" for p in ours))
    _run([str(python), "-m", "pip", "install", "--no-deps", "--no-index", "--ignore-installed",
          str(wheels[0])], tmp_path, env, timeout=300)

    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    where = _run([str(python), "-c",
                  "import zeckenum, zeckenum.cluster, zeckenum.rules.catalogue as c\n"
                  "print(zeckenum.__file__); print(zeckenum.cluster.__file__)\n"
                  "print(c.RULESETS_DIR); print(','.join(sorted(c.BUILTIN)))"],
                 elsewhere, env, timeout=300).splitlines()
    venv_root = venv.resolve()
    for line in where[:3]:
        assert Path(line).resolve().is_relative_to(venv_root), (line, venv_root)
        assert not Path(line).resolve().is_relative_to(REPO), line
    assert len(where[3].split(",")) == len(tomls)  # one rule set per shipped file

    out = _run([str(python), "-m", "zeckenum", "count", "5", "--json"], elsewhere, env,
               timeout=600)
    got = json.loads(out)
    want = bf.census(5)
    assert got["n"] == 5 and got["rules"] == "standard"
    assert int(got["games"]) == want["games"]
    assert got["states"] == want["states"] and got["transitions"] == want["transitions"]
    assert {int(k): int(v) for k, v in got["length_counts"].items()} == want["length_counts"]
