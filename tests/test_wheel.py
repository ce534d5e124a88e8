"""The built wheel: every module and the worked examples ship, and the installed command runs.

A wheel is built from the checkout's files (copied, so the build leaves nothing
in the checkout) without build isolation (isolation would need the network),
installed with ``--no-deps`` into a fresh virtual environment made without
system packages, and given the test environment's dependencies through a
``.pth`` line that names its site-packages folders.  A path named in a
``.pth`` file is only added to ``sys.path``; the ``.pth`` files inside it (the
editable install's finder) are not run, so ``scaling`` can only come from the
wheel, which the test checks.  Common practice for packaging checks, no source.
"""
from __future__ import annotations

import importlib.util
import os
import shutil
import site
import subprocess
import sys
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "scaling"
EXAMPLE_SUFFIXES = (".csv", ".yaml", ".nwk")

pytestmark = pytest.mark.slow


def _build_reason() -> str | None:
    """Why a wheel cannot be built here without the network (None: it can)."""
    if importlib.util.find_spec("setuptools") is None:
        return "setuptools is not installed in the test environment (pip install -e '.[test]')"
    import setuptools
    major, minor = (int(p) for p in setuptools.__version__.split(".")[:2])
    if (major, minor) < (70, 1) and importlib.util.find_spec("wheel") is None:
        return (f"setuptools {setuptools.__version__} needs the 'wheel' package to build a "
                "wheel without build isolation (pip install -e '.[test]')")
    return None


def _run(args, **kwargs) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env["MPLBACKEND"] = "Agg"
    return subprocess.run([str(a) for a in args], capture_output=True, text=True, env=env,
                          **kwargs)


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    reason = _build_reason()
    if reason is not None:
        print(f"skipped: {reason}")
        pytest.skip(reason)
    work = tmp_path_factory.mktemp("wheel")
    source = work / "source"
    source.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, source / name)
    shutil.copytree(PACKAGE, source / "scaling",
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    built = _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                  "--no-index", "-w", work / "dist", source], cwd=work)
    assert built.returncode == 0, built.stdout[-2000:] + built.stderr[-2000:]
    (found,) = (work / "dist").glob("scaling-*.whl")
    return found


@pytest.fixture(scope="module")
def fresh_env(wheel, tmp_path_factory) -> Path:
    """A virtual environment without system packages, holding the wheel (no -e)."""
    env = tmp_path_factory.mktemp("env") / "venv"
    venv.create(env, with_pip=False, system_site_packages=False)
    python = env / "bin" / "python"
    installed = _run([sys.executable, "-m", "pip", "--python", python, "install",
                      "--no-deps", "--no-index", wheel])
    assert installed.returncode == 0, installed.stdout[-2000:] + installed.stderr[-2000:]
    purelib = _run([python, "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"])
    # the test environment's dependencies (numpy, pandas, ...), appended after the wheel's
    deps = [p for p in site.getsitepackages() if Path(p).is_dir()]
    Path(purelib.stdout.strip(), "test_dependencies.pth").write_text(
        "\n".join(deps) + "\n", encoding="utf-8")
    return env


class TestWheelContents:
    def test_every_module_of_the_checkout_is_in_the_wheel(self, wheel):
        names = set(zipfile.ZipFile(wheel).namelist())
        modules = {p.relative_to(ROOT).as_posix() for p in PACKAGE.rglob("*.py")
                   if "__pycache__" not in p.parts}
        assert sorted(modules - names) == []
        for floor in ("stats", "run", "render", "io"):
            assert f"scaling/{floor}/__init__.py" in names

    def test_the_worked_examples_are_in_the_wheel(self, wheel):
        names = set(zipfile.ZipFile(wheel).namelist())
        examples = {p.relative_to(ROOT).as_posix() for p in (PACKAGE / "examples").iterdir()
                    if p.suffix in EXAMPLE_SUFFIXES}
        assert {Path(e).suffix for e in examples} == set(EXAMPLE_SUFFIXES)
        assert sorted(examples - names) == []


class TestInstalledWheel:
    def test_scaling_is_imported_from_the_fresh_environment(self, fresh_env, tmp_path):
        # run from an empty folder: the checkout must not be on sys.path
        shown = _run([fresh_env / "bin" / "python", "-c",
                      "import scaling, scaling.run.pipeline; print(scaling.__file__)"],
                     cwd=tmp_path)
        assert shown.returncode == 0, shown.stderr[-2000:]
        location = Path(shown.stdout.strip()).resolve()
        assert location.is_relative_to(fresh_env.resolve()), location

    def test_init_example_then_run_exits_0(self, fresh_env, tmp_path):
        command = fresh_env / "bin" / "scaling"
        folder = tmp_path / "physiology"
        made = _run([command, "init", "--example", "physiology", folder], cwd=tmp_path)
        assert made.returncode == 0, made.stderr[-2000:]
        config = folder / "physiology.yaml"
        assert config.is_file()
        ran = _run([command, "run", config, "--out", tmp_path / "out", "--quiet"],
                   cwd=tmp_path)
        assert ran.returncode == 0, ran.stderr[-2000:]
        assert (tmp_path / "out" / "fits.csv").is_file()
        assert (tmp_path / "out" / "report.html").is_file()
