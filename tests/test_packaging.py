"""The wheel installs exactly one import package, ``halo``, with the CLI and specs inside it."""

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_wheel_has_only_halo(tmp_path):
    # build from a copy so that the checkout gets no build/ or egg-info folders
    src = tmp_path / "src"
    ignore = shutil.ignore_patterns("__pycache__", "*.egg-info", "build", "dist")
    for name in ("src", "cli", "models"):
        shutil.copytree(ROOT / name, src / name, ignore=ignore)
    for name in ("pyproject.toml", "README.md", "LICENSE"):
        shutil.copy(ROOT / name, src / name)
    out = tmp_path / "dist"
    cmd = [sys.executable, "-m", "build", "--wheel", "--no-isolation", "--outdir", str(out)]
    res = subprocess.run(cmd, cwd=src, capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr[-2000:]
    (wheel,) = out.glob("*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    top = {n.split("/")[0] for n in names if not n.split("/")[0].endswith((".dist-info", ".data"))}
    assert top == {"halo"}, top
    needed_files = (
        "halo/cli/app.py",
        "halo/models/nfw.toml",
        "halo/models/stars-only.toml",
        "halo/data/demo_satellite.toml",
        "halo/physics/jeans.py",
    )
    for needed in needed_files:
        assert needed in names, needed
    # every stage subpackage of the source tree is in the wheel
    for init in sorted((ROOT / "src" / "halo").rglob("__init__.py")):
        rel = "halo/" + init.relative_to(ROOT / "src" / "halo").as_posix()
        assert rel in names, rel
    # and nothing of the source tree is left out
    for path in sorted((ROOT / "src" / "halo").rglob("*")):
        if path.is_file() and "__pycache__" not in path.parts:
            rel = "halo/" + path.relative_to(ROOT / "src" / "halo").as_posix()
            assert rel in names, f"{rel} is not packaged"
    # the console script points into the package
    entry = next(n for n in names if n.endswith("entry_points.txt"))
    text = zipfile.ZipFile(wheel).read(entry).decode()
    assert "halo = halo.cli.app:main" in text
