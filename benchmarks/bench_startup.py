"""Benchmark: start-up of the ``scaling`` command and the demo's wall time.

Each measurement is a fresh interpreter (``subprocess``), timed from outside,
repeated ``REPEATS`` times; the median is printed (the machine is shared, so
single timings are noise).  Baselines measured in the same run:

* ``python -c pass``                 -- the interpreter alone;
* ``python -c "import numpy, pandas"`` -- the least a data tool pays.

Measured:

* ``scaling --version``              (target < 0.3 s on 2 cores);
* ``python -c "import scaling"``     (lazy: loads no numeric module);
* ``scaling run configs/demo.yaml``  (target < 4 s on 2 cores), with the
  demo's figures (png + pdf), with ``figures.kinds: []``, and with the
  figures drawn in the calling process (``SCALING_ONE_PROCESS=1``: no
  forked figure worker; the baseline for :mod:`scaling.render.figure_worker`).

Printed: median seconds, min-max, and the ratio to each baseline, then
whether the targets are met.

``scaling`` is run as ``python -c "from scaling.cli import entry_point; ..."``
(what the installed command does), so ``PYTHONPATH=/some/other/checkout``
times another version of the package with the same interpreter -- e.g. the
commit before a change, unpacked with ``git archive``.

Run:  python benchmarks/bench_startup.py [REPEATS]   (default 5)
"""

from __future__ import annotations

import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "demo.yaml"
PY = sys.executable
SCALING = [PY, "-c", "from scaling.cli import entry_point; entry_point()"]


CPU: dict[str, list[float]] = {}


def _cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _time(cmd: list[str], repeats: int, label: str = "", env: dict | None = None) -> list[float]:
    """Wall times; the children's CPU times (user + sys) go to CPU[label]."""
    out = []
    for _ in range(repeats):
        c0, t0 = _cpu(), time.perf_counter()
        # cwd outside the checkout: "python -c" puts the cwd first on sys.path
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                       cwd=tempfile.gettempdir(), env=env)
        out.append(time.perf_counter() - t0)
        CPU.setdefault(label, []).append(_cpu() - c0)
    return out


def _demo_config(folder: Path, figures: bool) -> Path:
    """demo.yaml with absolute data path; figures off if asked."""
    raw = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    raw["data"]["file"] = str((DEMO.parent / raw["data"]["file"]).resolve())
    if not figures:
        raw.setdefault("figures", {})["kinds"] = []
    path = folder / ("demo_fig.yaml" if figures else "demo_nofig.yaml")
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    return path


def main(repeats: int = 5) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        # one warm-up each: byte-compiled files and the disk cache, as for a user's second run
        subprocess.run([*SCALING, "--version"], check=True, stdout=subprocess.DEVNULL)
        cases = {
            "python -c pass": [PY, "-c", "pass"],
            "import numpy, pandas": [PY, "-c", "import numpy, pandas"],
            "scaling --version": [*SCALING, "--version"],
            "import scaling": [PY, "-c", "import scaling"],
            "import scaling.run.pipeline": [PY, "-c", "import scaling.run.pipeline"],
        }
        for figures in (False, True):
            cfg = _demo_config(tmp, figures)
            out = tmp / f"out_{figures}"
            label = "demo run, figures" if figures else "demo run, no figures"
            cases[label] = [*SCALING, "run", str(cfg), "--out", str(out), "--force",
                            "--quiet"]
        # the same run with every figure drawn in the calling process (no forked worker)
        cases["demo, figures, 1 process"] = cases["demo run, figures"]
        envs = {"demo, figures, 1 process": {**os.environ, "SCALING_ONE_PROCESS": "1"}}
        times = {}
        for label, cmd in cases.items():
            if label.startswith("demo"):
                _time(cmd, 1, env=envs.get(label))   # warm-up (font cache, first output folder)
            times[label] = _time(cmd, repeats, label, env=envs.get(label))
        shutil.rmtree(tmp, ignore_errors=True)

    med = {k: statistics.median(v) for k, v in times.items()}
    base_py, base_np = med["python -c pass"], med["import numpy, pandas"]
    cpu = {k: statistics.median(v) for k, v in CPU.items()}
    print(f"{repeats} runs each, fresh interpreter; median (min-max) wall seconds, and the")
    print("median CPU seconds (user + sys; less sensitive than wall time to a loaded machine)")
    print(f"{'':<24} {'median':>8} {'min-max':>15} {'/ python':>9} {'/ np+pd':>8} "
          f"{'cpu':>7} {'cpu/np+pd':>9}")
    for label, v in times.items():
        print(f"{label:<24} {med[label]:8.3f} {min(v):7.3f}-{max(v):<7.3f} "
              f"{med[label] / base_py:9.1f} {med[label] / base_np:8.2f} "
              f"{cpu[label]:7.3f} {cpu[label] / cpu['import numpy, pandas']:9.2f}")
    print()
    print(f"target --version < 0.3 s: {'met' if med['scaling --version'] < 0.3 else 'NOT met'}"
          f" ({med['scaling --version']:.3f} s)")
    print(f"target demo < 4 s: {'met' if med['demo run, figures'] < 4 else 'NOT met'}"
          f" ({med['demo run, figures']:.3f} s)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
