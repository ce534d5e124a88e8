"""The default in-memory road never loads scipy.stats or scipy.optimize.

Loading them costs the run's main process about 0.7 s and 45 MB; the road's
tests, intervals, Shapiro-Wilk, ANOVA, root search and nonlinear fit come
from stats.tails, stats.classic_tests, stats.roots and stats.nonlinear.
Each check runs in a fresh interpreter and reads its sys.modules.
"""

import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest


def _modules_after(code: str, cwd) -> dict:
    probe = code + textwrap.dedent("""
        import json, sys
        print(json.dumps(sorted(sys.modules)))
    """)
    out = subprocess.run([sys.executable, "-c", probe], cwd=cwd, capture_output=True,
                         text=True, check=True, env={"SCALING_ONE_PROCESS": "1",
                                                     "PATH": "/usr/bin:/bin"})
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


def _grouped_table(path):
    rng = np.random.default_rng(4)
    rows = ["mass,rate,clade"]
    for g, (a, b) in enumerate([(0.3, 0.74), (0.1, 0.70), (0.5, 0.78)]):
        x = 10 ** rng.uniform(0, 4, 40)
        y = 10 ** (a + b * np.log10(x) + rng.normal(0, 0.08, 40))
        rows += [f"{xi:.6g},{yi:.6g},c{g}" for xi, yi in zip(x, y)]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


@pytest.mark.parametrize("road", ["in_memory", "moments"])
def test_grouped_run_with_diagnostics_loads_no_scipy_stats_or_optimize(tmp_path, road):
    _grouped_table(tmp_path / "table.csv")
    # a tiny moments_above_mb sends the file down the moments path (two passes)
    above = "1e-9" if road == "moments" else "100"
    (tmp_path / "run.yaml").write_text(textwrap.dedent(f"""
        data: {{file: table.csv, x: mass, y: rate, group: clade, moments_above_mb: {above}}}
        model: {{methods: [ols, sma, ma]}}
        exponents: {{three_quarters: 0.75}}
        groups: {{compare: true, fit_group_means: true}}
        prediction: {{x: [10, 100]}}
        diagnostics: {{enabled: true, error_structure: true}}
        figures: {{formats: [], kinds: []}}
        output: {{dir: out}}
    """), encoding="utf-8")
    mods = _modules_after(textwrap.dedent("""
        from scaling.cli import main
        assert main(["run", "run.yaml", "--quiet"]) == 0
    """), tmp_path)
    # the run did its work: the diagnostics and error structure are written
    assert (tmp_path / "out" / "diagnostics.csv").exists()
    if road == "in_memory":   # the moments path has no rows for the error structure
        assert (tmp_path / "out" / "error_structure.csv").exists()
        assert "scaling.stats.error_structure" in mods and "scaling.stats.classic_tests" in mods
    else:
        assert "scaling.run.second_pass" in mods
        assert json.loads((tmp_path / "out" / "results.json").read_text(
            encoding="utf-8"))["manifest"].get("large_data")
    assert "scipy.stats" not in mods
    assert "scipy.optimize" not in mods


def test_import_and_version_stay_light(tmp_path):
    mods = _modules_after(textwrap.dedent("""
        import scaling
        from scaling.cli import main
        assert main(["--version"]) == 0
    """), tmp_path)
    assert not {m for m in mods if m.split(".")[0] in ("numpy", "scipy", "pandas")}
    mods = _modules_after("import scaling.run.pipeline\n", tmp_path)
    assert "scipy.stats" not in mods and "scipy.optimize" not in mods
    assert "scipy.linalg" not in mods
