"""Config validation: defaults, key paths in messages, suggestions, paths."""
from __future__ import annotations

import math
from pathlib import Path

import pytest

from scaling.io.config import METHOD_NAMES, config_from_dict, load_config
from scaling.errors import ConfigError
from scaling.stats.lines import METHODS

MINIMAL = "data: {file: d.csv, x: mass, y: rate}\n"


class TestLoadConfig:
    def test_defaults(self, write_config):
        cfg = load_config(write_config(MINIMAL))
        assert cfg.model.methods == ("ols", "sma", "ma")
        assert cfg.model.confidence == 0.95
        assert cfg.model.log_base == "10"
        assert cfg.prediction.correction == "smearing"
        assert cfg.exponents == {}
        assert cfg.data.group is None

    def test_paths_are_relative_to_config(self, write_config, tmp_path):
        cfg = load_config(write_config(MINIMAL + "output: {dir: out/here}\n"))
        assert cfg.data.file == (tmp_path / "d.csv").resolve()
        assert cfg.output.dir == (tmp_path / "out" / "here").resolve()

    def test_fraction_exponents(self, write_config):
        cfg = load_config(write_config(MINIMAL + "exponents: {a: 3/4, b: 2/3, c: 1}\n"))
        assert cfg.exponents["a"] == 0.75
        assert math.isclose(cfg.exponents["b"], 2 / 3)  # exact law: 2/3

    def test_numbers_in_e_notation_without_a_dot(self, write_config):
        # YAML 1.2 reads 1e-9 as a number; PyYAML (YAML 1.1) as the text '1e-9'
        text = ("data: {file: d.csv, x: mass, y: rate, moments_above_mb: 1e-9}\n"
                "exponents: {big: 2E0, small: -75e-2}\n")
        cfg = load_config(write_config(text))
        assert cfg.data.moments_above_mb == 1e-9
        assert cfg.exponents == {"big": 2.0, "small": -0.75}
        # text that only looks like it stays text, and is named when a number is due
        with pytest.raises(ConfigError, match=r"data.moments_above_mb: expected a number, "
                                              r"got '1e' \(str\)"):
            load_config(write_config("data: {file: d.csv, x: mass, y: rate, "
                                     "moments_above_mb: 1e}\n"))

    def test_log_base_forms(self, write_config):
        for text, label in (("10", "10"), ("e", "e"), ("2", "2"), ('"10"', "10")):
            cfg = load_config(write_config(MINIMAL + f"model: {{log_base: {text}}}\n"))
            assert cfg.model.log_base == label

    def test_method_names_agree_with_registry(self):
        # The config's names are exactly: the moment methods of lines.METHODS, the
        # Deming line (moments plus lambda) and the row-based robust.ROW_METHODS;
        # every one has a label in lines.METHOD_INFO; the moment names are the
        # methods resample.bootstrap_lines can resample.
        from scaling.io.config import MOMENT_METHOD_NAMES
        from scaling.stats.lines import METHOD_INFO
        from scaling.stats.resampling import MOMENT_METHODS
        from scaling.stats.robust import ROW_METHODS
        assert set(METHOD_NAMES) == set(METHODS) | {"deming"} | set(ROW_METHODS)
        assert set(METHOD_NAMES) == set(METHOD_INFO)
        assert set(MOMENT_METHOD_NAMES) == set(MOMENT_METHODS)

    def test_missing_file(self, tmp_path):
        with pytest.raises(ConfigError, match="config file not found"):
            load_config(tmp_path / "nope.yaml")

    def test_yaml_syntax_error_names_line(self, write_config):
        with pytest.raises(ConfigError, match=r"YAML syntax error at line 2, column 6: mapping values"):
            load_config(write_config("data:\n  x: : bad\n"))

    def test_empty_file(self, write_config):
        with pytest.raises(ConfigError, match="config file is empty"):
            load_config(write_config(""))

    def test_unknown_top_key_suggests(self, write_config):
        with pytest.raises(ConfigError, match=r"run.yaml: modle: unknown key; did you mean 'model'\?"):
            load_config(write_config(MINIMAL + "modle: {}\n"))

    def test_unknown_nested_key_suggests(self, write_config):
        with pytest.raises(ConfigError, match=r"model.methds: unknown key; did you mean 'methods'\?"):
            load_config(write_config(MINIMAL + "model: {methds: [ols]}\n"))

    def test_bad_method_names_index(self, write_config):
        with pytest.raises(ConfigError,
                           match=r"model.methods\[1\]: 'smaa' is not a method; did you mean 'sma'\?"):
            load_config(write_config(MINIMAL + "model: {methods: [ols, smaa]}\n"))

    def test_wrong_type(self, write_config):
        with pytest.raises(ConfigError, match=r"model.confidence: expected a number, got 'high'"):
            load_config(write_config(MINIMAL + "model: {confidence: high}\n"))

    def test_confidence_range(self, write_config):
        with pytest.raises(ConfigError, match=r"model.confidence: must lie between 0 and 1"):
            load_config(write_config(MINIMAL + "model: {confidence: 95}\n"))

    def test_required_key(self, write_config):
        with pytest.raises(ConfigError, match=r"data.y: is required"):
            load_config(write_config("data: {file: d.csv, x: mass}\n"))

    def test_data_section_required(self, write_config):
        with pytest.raises(ConfigError, match=r"data: is required"):
            load_config(write_config("title: nothing\n"))

    def test_same_x_and_y(self, write_config):
        with pytest.raises(ConfigError, match=r"data.y: is the same column as data.x"):
            load_config(write_config("data: {file: d.csv, x: m, y: m}\n"))

    def test_boolean_type(self, write_config):
        with pytest.raises(ConfigError, match=r"groups.compare: expected true or false"):
            load_config(write_config(MINIMAL + "groups: {compare: maybe}\n"))

    def test_prediction_must_be_positive(self, write_config):
        with pytest.raises(ConfigError, match=r"prediction.x\[1\]: must be positive"):
            load_config(write_config(MINIMAL + "prediction: {x: [1, -2]}\n"))

    def test_bad_choice(self, write_config):
        with pytest.raises(ConfigError, match=r"prediction.correction: 'smear' is not one of .*did you mean 'smearing'"):
            load_config(write_config(MINIMAL + "prediction: {correction: smear}\n"))

    def test_bad_log_base(self, write_config):
        with pytest.raises(ConfigError, match=r"model.log_base: expected 10, e or 2, got 3"):
            load_config(write_config(MINIMAL + "model: {log_base: 3}\n"))

    def test_duplicate_method(self, write_config):
        with pytest.raises(ConfigError, match=r"model.methods\[1\]: 'ols' is listed twice"):
            load_config(write_config(MINIMAL + "model: {methods: [ols, ols]}\n"))

    def test_section_not_mapping(self, write_config):
        with pytest.raises(ConfigError, match=r"model: expected a mapping of keys"):
            load_config(write_config(MINIMAL + "model: [ols]\n"))

    def test_bad_exponent(self, write_config):
        with pytest.raises(ConfigError, match=r"exponents.k: cannot read '3/x' as a fraction"):
            load_config(write_config(MINIMAL + "exponents: {k: 3/x}\n"))

    def test_exclude_shape(self, write_config):
        with pytest.raises(ConfigError, match=r"data.exclude: expected a mapping"):
            load_config(write_config("data: {file: d.csv, x: m, y: r, exclude: [a]}\n"))

    def test_from_dict_label(self):
        with pytest.raises(ConfigError, match=r"^config: data: is required"):
            config_from_dict({}, base_dir=Path("."))

    def test_weight_means_refused_for_sma(self, write_config):
        with pytest.raises(ConfigError, match=r"groups.weight_means: weighting group means is "
                                               r"available for OLS only"):
            load_config(write_config(MINIMAL + "groups: {weight_means: true}\n"))
        cfg = load_config(write_config(MINIMAL + "groups: {weight_means: true}\n"
                                       "model: {methods: [ols]}\n"))
        assert cfg.groups.weight_means

    def test_config_is_frozen(self, write_config):
        cfg = load_config(write_config(MINIMAL))
        with pytest.raises(AttributeError):
            cfg.title = "x"


class TestDiagnosticsResamplingAndDemingKeys:
    """model.deming_lambda / error_variances, diagnostics:, resampling:."""

    def test_defaults(self, write_config):
        cfg = load_config(write_config(MINIMAL))
        assert cfg.model.deming_lambda == 1.0 and cfg.model.error_variances == {}
        assert cfg.diagnostics.enabled and cfg.diagnostics.alpha == 0.05
        assert cfg.diagnostics.error_structure and cfg.diagnostics.exponent_at == ()
        assert (cfg.resampling.bootstrap, cfg.resampling.interval,
                cfg.resampling.permutations, cfg.resampling.seed) == (0, "bca", 0, 1)

    def test_new_methods_accepted(self, write_config):
        cfg = load_config(write_config(MINIMAL + "model: {methods: [deming, theil_sen, siegel, "
                                       "sma_robust, ma_robust]}\n"))
        assert cfg.model.methods == ("deming", "theil_sen", "siegel", "sma_robust", "ma_robust")

    def test_lambda_from_error_variances(self, write_config):
        cfg = load_config(write_config(MINIMAL + "model: {error_variances: {x: 0.0004, y: 0.002}}\n"))
        assert math.isclose(cfg.model.deming_lambda, 0.002 / 0.0004)  # exact law: lambda = y/x

    def test_lambda_direct(self, write_config):
        cfg = load_config(write_config(MINIMAL + "model: {deming_lambda: 2.5}\n"))
        assert cfg.model.deming_lambda == 2.5

    def test_both_lambda_keys_refused(self, write_config):
        with pytest.raises(ConfigError, match=r"model.error_variances: give either "
                                               r"model.deming_lambda or model.error_variances"):
            load_config(write_config(MINIMAL + "model: {deming_lambda: 2, error_variances: "
                                     "{x: 1, y: 2}}\n"))

    def test_lambda_positive(self, write_config):
        with pytest.raises(ConfigError, match=r"model.deming_lambda: must be a positive number"):
            load_config(write_config(MINIMAL + "model: {deming_lambda: 0}\n"))

    def test_error_variances_shape(self, write_config):
        with pytest.raises(ConfigError, match=r"model.error_variances: expected a mapping like"):
            load_config(write_config(MINIMAL + "model: {error_variances: 0.3}\n"))
        with pytest.raises(ConfigError, match=r"model.error_variances.y: is required"):
            load_config(write_config(MINIMAL + "model: {error_variances: {x: 0.3}}\n"))
        with pytest.raises(ConfigError, match=r"model.error_variances.z: unknown key; did you "
                                               r"mean 'x'|model.error_variances.z: unknown key"):
            load_config(write_config(MINIMAL + "model: {error_variances: {x: 1, z: 2}}\n"))

    def test_alpha_range(self, write_config):
        with pytest.raises(ConfigError, match=r"diagnostics.alpha: must lie between 0 and 0.5"):
            load_config(write_config(MINIMAL + "diagnostics: {alpha: 0.9}\n"))

    def test_exponent_at_fractions(self, write_config):
        cfg = load_config(write_config(MINIMAL + "diagnostics: {exponent_at: [3/4, 1]}\n"))
        assert cfg.diagnostics.exponent_at == (0.75, 1.0)  # exact law: 3/4 = 0.75

    def test_bootstrap_range(self, write_config):
        with pytest.raises(ConfigError, match=r"resampling.bootstrap: must be 0 \(off\) or at "
                                               r"least 99 resamples"):
            load_config(write_config(MINIMAL + "resampling: {bootstrap: 50}\n"))
        with pytest.raises(ConfigError, match=r"resampling.permutations: must be at least 0"):
            load_config(write_config(MINIMAL + "resampling: {permutations: -1}\n"))

    def test_interval_choice(self, write_config):
        with pytest.raises(ConfigError, match=r"resampling.interval: 'bcaa' is not one of "
                                               r"percentile, bca; did you mean 'bca'\?"):
            load_config(write_config(MINIMAL + "resampling: {interval: bcaa}\n"))

    def test_mistyped_keys_suggest(self, write_config):
        with pytest.raises(ConfigError, match=r"resampling.bootstrp: unknown key; did you mean "
                                               r"'bootstrap'\?"):
            load_config(write_config(MINIMAL + "resampling: {bootstrp: 999}\n"))
        with pytest.raises(ConfigError, match=r"diagnosticks: unknown key; did you mean "
                                               r"'diagnostics'\?"):
            load_config(write_config(MINIMAL + "diagnosticks: {}\n"))


class TestDefaultsWrittenOnce:
    """Each key's default is written once, in the schema table; the dataclasses read it."""

    # where a key lands on the config object when it is not the field of the same name
    FIELD = {("prediction", "from"): "from_file"}

    def test_a_minimal_config_gets_every_documented_default(self, tmp_path):
        # internal consistency: the value a config from {data: {file, x, y}} holds for
        # each key equals the schema's default (a rule's default: the rule applied to the
        # section's defaults)
        from scaling.io import config as module
        cfg = config_from_dict({"data": {"file": "d.csv", "x": "mass", "y": "rate"}},
                               base_dir=tmp_path)
        checked = 0
        for section, keys in module._SCHEMA.items():
            held = getattr(cfg, section)
            plain = {k: d for k, (_, d) in keys.items() if not isinstance(d, module._Rule)}
            for key, (_, default) in keys.items():
                if default is module._REQUIRED:
                    continue
                got = getattr(held, self.FIELD.get((section, key), key))
                if isinstance(default, module._Rule):
                    default = default.resolve(plain)
                elif (section, key) == ("output", "dir"):   # None: results/<stem>
                    default = (tmp_path / "results" / "scaling").resolve()
                assert got == default, f"{section}.{key}"
                checked += 1
        for key, (_, default) in module._TOP_SCHEMA.items():
            assert getattr(cfg, key) == default, key
            checked += 1
        required = 3                                   # data.file, data.x, data.y
        assert checked == (sum(len(k) for k in module._SCHEMA.values()) - required
                           + len(module._TOP_SCHEMA))

    def test_the_two_rules_give_what_the_run_uses(self, write_config):
        # internal consistency: the default methods (ols, sma, ma) lead with SMA, and an
        # unset lambda is 1 (equal error variances on the log scales)
        cfg = load_config(write_config(MINIMAL))
        assert cfg.model.primary == "sma" and cfg.model.deming_lambda == 1.0
        cfg = load_config(write_config(MINIMAL + "model: {methods: [ols, ma]}\n"))
        assert cfg.model.primary == "ma"
        cfg = load_config(write_config(MINIMAL + "model: {methods: [theil_sen, ols]}\n"))
        assert cfg.model.primary == "ols"
        cfg = load_config(write_config(MINIMAL + "model: {primary: null, methods: [siegel]}\n"))
        assert cfg.model.primary == "siegel"

    def test_dataclass_defaults_are_the_schema_defaults(self):
        # internal consistency: every field default of a section's dataclass is its key's
        from dataclasses import MISSING, fields

        from scaling.io import config as module
        classes = {"data": module.DataConfig, "model": module.ModelConfig,
                   "groups": module.GroupsConfig, "prediction": module.PredictionConfig,
                   "figures": module.FiguresConfig, "diagnostics": module.DiagnosticsConfig,
                   "resampling": module.ResamplingConfig}
        for section, cls in classes.items():
            for f in fields(cls):
                key = {"from_file": "from"}.get(f.name, f.name)
                if key not in module._SCHEMA[section]:
                    continue          # prediction.x_table: filled from a mapping prediction.x
                default = module._SCHEMA[section][key][1]
                value = (f.default if f.default is not MISSING else
                         f.default_factory() if f.default_factory is not MISSING else
                         module._REQUIRED)
                if isinstance(default, module._Rule):
                    assert value is module._REQUIRED, f"{section}.{key}"
                else:
                    assert value == default or value is default, f"{section}.{key}"

    def test_a_mapping_default_is_not_shared_between_configs(self, write_config):
        a = load_config(write_config(MINIMAL))
        b = load_config(write_config(MINIMAL))
        assert a.model.phylogeny == b.model.phylogeny == {"lambda": "ml", "model": "lambda",
                                                          "sampling_error": False}
        assert a.model.phylogeny is not b.model.phylogeny


class TestOneDefaultSeed:
    """One default seed: a run, compare_groups and the robust lines of fit_line agree."""

    def test_every_seed_default_is_the_schema_constant(self, write_config):
        # internal consistency: the config default, compare_groups' keyword default and
        # the robust-line option default are the one constant
        import inspect

        from scaling.api import ROW_METHOD_DEFAULTS
        from scaling.stats.group_comparisons import compare_groups
        from scaling.stats.schema import DEFAULT_SEED
        cfg = load_config(write_config(MINIMAL))
        assert cfg.resampling.seed == DEFAULT_SEED
        assert inspect.signature(compare_groups).parameters["seed"].default == DEFAULT_SEED
        assert ROW_METHOD_DEFAULTS["seed"] == DEFAULT_SEED

    def test_a_run_seeds_the_group_bootstrap_with_resampling_seed(self, write_config,
                                                                  tmp_path):
        # internal consistency: the group tests of a run with resampling.seed 5 equal
        # compare_groups(..., seed=5) on the same points (bootstrap calibration: groups
        # of 6, below the size where the chi-square reference is used)
        import numpy as np
        import pandas as pd

        from scaling.run.pipeline import run_config
        from scaling.stats.group_comparisons import compare_groups
        rng = np.random.default_rng(3)
        mass = 10 ** rng.uniform(0, 2, 18)
        rate = 2.0 * mass ** 0.75 * 10 ** rng.normal(0, 0.1, 18)
        frame = pd.DataFrame({"g": list("aaaaaabbbbbbcccccc"), "mass": mass, "rate": rate})
        frame.to_csv(tmp_path / "d.csv", index=False)
        path = write_config("data: {file: d.csv, x: mass, y: rate, group: g}\n"
                            "model: {methods: [sma]}\nfigures: {formats: []}\n"
                            "diagnostics: {enabled: false}\nresampling: {seed: 5}\n")
        result = run_config(path, out=tmp_path / "out", quiet=True)
        direct = compare_groups(frame, "mass", "rate", "g", method="sma", seed=5).to_frame()
        assert direct["p_method"].str.startswith("parametric").any()
        got = result.group_tests.set_index("test")["p_value"]
        want = direct.set_index("test")["p_value"]
        assert np.allclose(got[want.index], want, rtol=1e-12)
