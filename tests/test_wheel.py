"""The built wheel works on its own: installed without ``-e`` into a fresh virtual
environment, ``retain demo`` and ``retain build`` run from an unrelated folder.

The SQL steps, the site templates and the demo data live in top-level folders of
the repository and are mapped into the wheel by pyproject.toml; a wheel that
left them out could not prepare or build (the failure this test guards against).

To stay fast the fresh environment borrows the test environment's third-party
packages through a ``.pth`` line (a path added that way is not scanned for
``.pth`` files, so the test environment's editable retain is never installed
there); the test asserts that ``retain`` is imported from the new environment.
"""

from __future__ import annotations

import os
import re
import shutil
import site
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest
import tomllib

REPO = Path(__file__).resolve().parent.parent
SOURCES = ("pyproject.toml", "README.md", "LICENSE", "retain", "sql", "site_templates",
           "demo_data")


def _run(cmd: list[str], cwd: Path, env: dict[str, str] | None = None,
         timeout: float = 300) -> subprocess.CompletedProcess:
    proc = subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=timeout)
    assert proc.returncode == 0, (
        f"{' '.join(map(str, cmd))} exited {proc.returncode}\n"
        f"stdout:\n{proc.stdout[-3000:]}\nstderr:\n{proc.stderr[-3000:]}")
    return proc


def test_every_subpackage_is_listed_in_pyproject():
    """A subpackage missing from [tool.setuptools] packages would be left out of the wheel."""
    listed = set(tomllib.loads((REPO / "pyproject.toml").read_text())["tool"]["setuptools"]
                 ["packages"])
    on_disk = {".".join(p.parent.relative_to(REPO).parts)
               for p in (REPO / "retain").rglob("__init__.py") if "__pycache__" not in p.parts}
    assert on_disk <= listed, f"add to pyproject.toml packages: {sorted(on_disk - listed)}"


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    """``pip wheel --no-deps`` of a clean copy of the sources (no build/ litter in the repo)."""
    root = tmp_path_factory.mktemp("wheel")
    src = root / "src"
    src.mkdir()
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info")
    for name in SOURCES:
        path = REPO / name
        if path.is_dir():
            shutil.copytree(path, src / name, ignore=ignore)
        else:
            shutil.copy2(path, src / name)
    out = root / "dist"
    _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(out), str(src)],
         cwd=root)
    (whl,) = out.glob("retain-*.whl")
    return whl


def test_wheel_carries_sql_templates_and_demo(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    for folder, pattern in (("sql", "*.sql"), ("site_templates", "*"), ("demo_data", "*")):
        for path in (REPO / folder).glob(pattern):
            if path.is_file() and path.name != "__init__.py" and path.suffix != ".pyc" \
                    and not path.name.startswith("."):
                assert f"retain/_{folder}/{path.name}" in names, f"{folder}/{path.name} not shipped"
    meta = zipfile.ZipFile(wheel).read(
        next(n for n in names if n.endswith(".dist-info/METADATA"))).decode()
    # PEP 639: the licence is an SPDX expression, not the deprecated table
    assert re.search(r"^License-Expression: GPL-3\.0-or-later$", meta, re.M), meta[:800]


def test_installed_wheel_runs_demo_and_build(wheel, tmp_path):
    venv = tmp_path / "venv"
    _run([sys.executable, "-m", "venv", "--without-pip", str(venv)], cwd=tmp_path)
    py = venv / "bin" / "python"
    _run([sys.executable, "-m", "pip", "--python", str(py), "install", "--no-deps", "-q",
          str(wheel)], cwd=tmp_path)
    new_site = Path(_run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()"
                          "['purelib'])"], cwd=tmp_path).stdout.strip())
    parents = [p for p in site.getsitepackages() if Path(p).resolve() != new_site.resolve()]
    (new_site / "_borrowed_test_env.pth").write_text("\n".join(parents) + "\n")

    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["PATH"] = f"{venv / 'bin'}{os.pathsep}{env.get('PATH', '')}"

    where = _run([str(py), "-c", "import retain, retain.paths as p; print(retain.__file__); "
                  "print(p.SQL_DIR); print(p.TEMPLATES_DIR); print(p.DEMO_DIR)"],
                 cwd=elsewhere, env=env).stdout.split()
    for line in where:
        assert Path(line).resolve().is_relative_to(venv.resolve()), where

    retain_cmd = str(venv / "bin" / "retain")
    demo = _run([retain_cmd, "--quiet", "demo", "--out", "demo_out"], cwd=elsewhere, env=env)
    index = Path(demo.stdout.strip().splitlines()[-1])
    assert index == (elsewhere / "demo_out" / "site" / "index.html").resolve()
    assert index.is_file() and (index.parent / "assets" / "style.css").is_file()
    assert (elsewhere / "demo_out" / "start_stop.parquet").is_file()

    # a project of the user's own, outside the package
    project = tmp_path / "project"
    project.mkdir()
    shutil.copy2(REPO / "demo_data" / "quillfern_events.csv.gz", project)
    shutil.copy2(REPO / "demo_data" / "retain.toml", project)
    built = _run([retain_cmd, "--quiet", "build", str(project / "retain.toml"), "--out",
                  "site_y"], cwd=elsewhere, env=env)
    index = Path(built.stdout.strip().splitlines()[-1])
    assert index == (elsewhere / "site_y" / "index.html").resolve()
    assert "Retention review: quillfern_events.csv.gz" in index.read_text(encoding="utf-8")
    demo_pages = sorted(p.name for p in (elsewhere / "demo_out" / "site").glob("*.html"))
    assert sorted(p.name for p in index.parent.glob("*.html")) == demo_pages
    assert len(demo_pages) >= 5
