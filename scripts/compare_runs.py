"""Run every shipped config with two versions of the package and compare outputs.

Usage (from the checkout)::

    .venv/bin/python scripts/compare_runs.py REV        # REV: a git revision, e.g. HEAD~3

The working tree's package and the package at ``REV`` (exported with
``git archive``) each run ``configs/*.yaml`` with ``SCALING_ONE_PROCESS=1``.
Both read the working tree's config files. Every CSV, ``fits.tex`` and
``summary.md`` must be byte-identical; ``results.json`` must be identical
apart from ``manifest.created_utc`` (and
``summary.md`` apart from its "Created (UTC)" line). Prints one line per config and exits 1 on any
difference (the first differing line of each file is shown).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
VOLATILE = {"created_utc"}


def _export(rev: str, dest: Path) -> Path:
    archive = dest / "rev.tar"
    subprocess.run(["git", "-C", str(ROOT), "archive", "-o", str(archive), rev], check=True)
    with tarfile.open(archive) as tar:
        tar.extractall(dest / "src")
    return dest / "src"


def _run(src: Path, config: Path, out: Path) -> None:
    env = dict(os.environ, PYTHONPATH=str(src), SCALING_ONE_PROCESS="1")
    code = ("import sys; from scaling.cli import main; "
            "sys.exit(main(['run', sys.argv[1], '--out', sys.argv[2], '--force', '--quiet']))")
    subprocess.run([sys.executable, "-c", code, str(config), str(out)], env=env, check=True,
                   cwd=src)


def _strip(obj):
    if isinstance(obj, dict):
        return {k: _strip(v) for k, v in obj.items() if k not in VOLATILE}
    if isinstance(obj, list):
        return [_strip(v) for v in obj]
    return obj


def _drop_created(text: str) -> str:
    return "\n".join(line for line in text.splitlines() if not line.startswith("- Created (UTC)"))


def _first_difference(a, b, path="") -> str:
    if isinstance(a, dict) and isinstance(b, dict):
        for key in sorted(set(a) | set(b)):
            if a.get(key) != b.get(key):
                return _first_difference(a.get(key), b.get(key), f"{path}.{key}")
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        for i, (x, y) in enumerate(zip(a, b)):
            if x != y:
                return _first_difference(x, y, f"{path}[{i}]")
    return f"{path}: {str(a)[:80]!r} vs {str(b)[:80]!r}"


def _compare(a: Path, b: Path) -> list[str]:
    problems = []
    names = sorted({p.relative_to(a) for p in a.rglob("*") if p.is_file()}
                   | {p.relative_to(b) for p in b.rglob("*") if p.is_file()})
    for name in names:
        pa, pb = a / name, b / name
        if name.suffix not in {".csv", ".tex", ".md", ".json"}:
            continue
        if not pa.exists() or not pb.exists():
            problems.append(f"{name}: only in {'new' if pb.exists() else 'old'}")
            continue
        if name.suffix == ".json":
            ja, jb = (_strip(json.loads(p.read_text(encoding="utf-8"))) for p in (pa, pb))
            if ja != jb:
                problems.append(f"{name}: JSON differs at {_first_difference(ja, jb)}")
            continue
        ta, tb = (_drop_created(p.read_text(encoding="utf-8")) for p in (pa, pb))
        if ta != tb:
            for i, (la, lb) in enumerate(zip(ta.splitlines(), tb.splitlines()), 1):
                if la != lb:
                    problems.append(f"{name}:{i}: old {la[:100]!r} new {lb[:100]!r}")
                    break
            else:
                problems.append(f"{name}: lengths differ")
    return problems


def main(argv: list[str]) -> int:
    if len(argv) != 1:
        print(__doc__)
        return 2
    failed = False
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        old_src = _export(argv[0], tmp)
        for config in sorted((ROOT / "configs").glob("*.yaml")):
            old_out, new_out = tmp / "old" / config.stem, tmp / "new" / config.stem
            _run(old_src, config, old_out)   # same config file: paths in outputs match
            _run(ROOT, config, new_out)
            problems = _compare(old_out, new_out)
            failed |= bool(problems)
            print(f"{config.stem}: {'same' if not problems else 'DIFFERENT'}")
            for line in problems:
                print("   ", line)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
