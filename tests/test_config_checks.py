"""Strict configs (closure_nn/config_checks.py) and the resume that refuses a changed config.

Each refused case runs in-process through ``closure_nn.cli.main`` in an empty working folder and
checks: exit code 2, exactly one line on stderr naming the key and the valid choices or range (or,
for a misspelled key, the nearest valid key), no traceback, and no run folder or error log left.
The allowed sets are the code's own registries (root rules, correlations, loss options, unknown-
pattern rules, the config groups' yaml files); the physical ranges are those of
closure_nn.physics.checks.RANGES. The line and design YAML files written here are invented
examples, and the lab table is the invented oil-gas loop of tests/fixtures/loop_si.csv.

No published source applies: these check the tool's own input rules; the valid ranges of
physical values are those of closure_nn.physics.checks, whose tests name their sources.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from omegaconf import OmegaConf

from closure_nn.cli import ERROR_LOG, main
from closure_nn.config import CONF_DIR, load_config
from closure_nn.config_checks import changed_keys, check_config
from closure_nn.config_rule_types import Choice, MapOf, _registry
from closure_nn.config_rules import RULES
from closure_nn.physics.checks import InputError

FIXTURES = Path(__file__).parent / "fixtures"
POINT = ["point", "--vsl", "0.1", "--vsg", "1", "--D", "0.05"]
LINE_OK = """\
name: invented check line
invented: true
profile: profile.csv
D: 0.2
roughness: 4.5e-5
fluid: {rhol: 800.0, mul: 1.0e-3, sigma: 0.02, M_g: 0.019, Z: 0.9, mug: 1.2e-5}
temperature: {inlet: 300.0, outlet: 290.0}
rates: {gas: 2.0, liquid: 5.0}
pressure: {outlet: 3.0e6}
"""
DESIGN_OK = """\
name: invented_check
variables:
  vsl: {law: log_uniform, low: 0.01, high: 1.0}
  vsg: {law: log_uniform, low: 0.5, high: 20.0}
  D: {law: choice, values: [50, 100], unit: mm}
  theta: 0.0
  roughness: 0.0
  rhol: 998.0
  rhog: 1.2
  mul: 1.0e-3
  mug: 1.8e-5
  sigma: 0.072
"""


@pytest.fixture
def work(tmp_path, monkeypatch):
    shutil.copy(FIXTURES / "loop_si.csv", tmp_path / "lab.csv")
    shutil.copy(CONF_DIR.parent / "data_demo" / "lab_campaign.csv", tmp_path / "campaign.csv")  # invented demo data
    (tmp_path / "profile.csv").write_text("distance,elevation\n0,0\n1000,5\n2000,0\n")
    (tmp_path / "line_ok.yaml").write_text(LINE_OK)
    (tmp_path / "line_fluid_typo.yaml").write_text(LINE_OK.replace("sigma: 0.02", "sigam: 0.02"))
    (tmp_path / "line_top_typo.yaml").write_text(LINE_OK.replace("pressure:", "presure:"))
    (tmp_path / "design_var_typo.yaml").write_text(DESIGN_OK.replace("  vsg:", "  vsgg:"))
    (tmp_path / "design_unit_typo.yaml").write_text(DESIGN_OK.replace("unit: mm", "unti: mm"))
    (tmp_path / "mine" / "model").mkdir(parents=True)
    (tmp_path / "mine" / "model" / "wide.yaml").write_text("defaults:\n  - correction\n  - _self_\nhidden: [128, 128]\n")
    monkeypatch.chdir(tmp_path)
    return tmp_path


FIT = ["fit", "lab.csv"]
TRAIN = ["train", "data.train=lab.csv"]

# (id, argv, fragments the single stderr line must contain)
CASES = [
    # the point solver and the closure
    ("solver-rule", POINT + ["solver.select=middle"], ["config point: solver.select = 'middle'", "one of thinnest, thickest"]),
    ("solver-grid-small", POINT + ["solver.n_grid=2"], ["solver.n_grid = 2", "whole number >= 4"]),
    ("solver-grid-float", POINT + ["solver.n_grid=40.5"], ["solver.n_grid = 40.5", "whole number >= 4"]),
    ("solver-entrainment", POINT + ["solver.entrainment=1.5"], ["solver.entrainment = 1.5", "[0, 1)", "ishii_mishima"]),
    ("solver-key-typo", POINT + ["solver.selct=thickest"], ["unknown key 'solver.selct'", "did you mean 'solver.select'"]),
    ("closure-interface", POINT + ["closure.interface=rough"], ["closure.interface = 'rough'", "smooth", "andritsos_hanratty", "wallis"]),
    ("closure-group", POINT + ["closure=learnt"], ["closure = 'learnt'", "baseline, learned", "did you mean 'learned'"]),
    ("closure-path-on-baseline", POINT + ["closure.path=x"], ["unknown key 'closure.path'", "closure=learned"]),
    # train
    ("train-epochs", TRAIN + ["trainer.max_epochs=-1"], ["config train: trainer.max_epochs = -1", "null or a whole number >= 1"]),
    ("train-patience", TRAIN + ["trainer.patience=-2"], ["trainer.patience = -2", "whole number >= 0"]),
    ("train-batch", TRAIN + ["trainer.batch_size=0"], ["trainer.batch_size = 0", "whole number >= 1"]),
    ("train-lr-text", TRAIN + ["trainer.lr=fast"], ["trainer.lr = 'fast'", "a number > 0"]),
    ("train-strategy", TRAIN + ["trainer.strategy=dp"], ["trainer.strategy = 'dp'", "auto, ddp"]),
    ("train-model-group", TRAIN + ["model=wide"], ["model = 'wide'", "correction, direct, interface, shared"]),
    ("train-activation", TRAIN + ["model.activation=relu"], ["model.activation = 'relu'", "silu, tanh, softplus, gelu"]),
    ("train-model-mode", TRAIN + ["model.mode=residual"], ["model.mode = 'residual'", "correction, direct"]),
    ("train-learn", TRAIN + ["model.learn=[f_x]"], ["model.learn = ['f_x']", "f_wl, f_wg, f_i"]),
    ("train-pattern-rows", TRAIN + ["loss.pattern_rows=all"], ["loss.pattern_rows = 'all'", "data_first, pattern_only, observed"]),
    ("train-prior-space", TRAIN + ["loss.prior_space=linear"], ["loss.prior_space = 'linear'", "log_factor, unbounded"]),
    ("train-weight-typo", TRAIN + ["loss.weights.smoth=1"], ["unknown key 'loss.weights.smoth'", "did you mean 'loss.weights.smooth'"]),
    ("train-weight-negative", TRAIN + ["loss.weights.prior=-1"], ["loss.weights.prior = -1", "a number >= 0"]),
    ("train-val-fraction", TRAIN + ["data.val_fraction=1.5"], ["data.val_fraction = 1.5", "a number in (0, 1)"]),
    ("train-stage", TRAIN + ["stage=polish"], ["stage = 'polish'", "pretrain, finetune, update"]),
    ("train-added-key", TRAIN + ["+trainer.max_epoch=3"], ["unknown key 'trainer.max_epoch'", "did you mean 'trainer.max_epochs'"]),
    # synth and designs
    ("synth-design-group", ["synth", "design=demo_lop"], ["design = 'demo_lop'", "custom, demo_loop, demo_loop_and_line, wide",
                                                          "did you mean 'demo_loop'"]),
    ("synth-n", ["synth", "n=-5"], ["config synth: n = -5", "whole number >= 1"]),
    ("synth-design-variable", ["synth", "+design.variables.vsgg={law: fixed, value: 1.0}"],
     ["design demo_loop.variables", "unknown variable 'vsgg'", "did you mean 'vsg'"]),
    # fit
    ("fit-unknown-pattern", FIT + ["data.unknown_pattern=banana"],
     ["config fit: data.unknown_pattern = 'banana'", "skip, stratified, predicted, predicted_clear"]),
    ("fit-synth-n", FIT + ["fit.synth.n=0"], ["fit.synth.n = 0", "whole number >= 1"]),
    ("fit-margin", FIT + ["fit.margins.d_low=2"], ["fit.margins.d_low = 2", "(0, 1]"]),
    ("fit-search-key", FIT + ["+fit.search.space={trainer.lr: {low: 1.0e-3, high: 1.0e-2}, trainer.max_epoch: {choices: [3]}}"],
     ["fit.search.space", "unknown key 'trainer.max_epoch'", "did you mean 'trainer.max_epochs'"]),
    ("fit-config-dir-group", FIT + ["--config-dir", "mine", "model=wid"],
     ["model = 'wid'", "correction, direct, interface, shared, wide", "did you mean 'wide'"]),
    # line
    ("line-march", ["line", "march.shooting=secant"], ["config line: march.shooting = 'secant'", "newton, brentq"]),
    ("line-march-tol", ["line", "march.tol=0"], ["march.tol = 0 Pa", "a number > 0 Pa"]),
    ("line-yaml-fluid-typo", ["line", "line_fluid_typo.yaml"], ["line_fluid_typo.yaml, fluid", "unknown key 'sigam'",
                                                               "did you mean 'sigma'"]),
    ("line-yaml-top-typo", ["line", "line_top_typo.yaml"], ["line_top_typo.yaml", "unknown key 'presure'",
                                                           "did you mean 'pressure'"]),
    # map, audit, check-data, evaluate, demo
    ("map-theta", ["map", "theta_deg=120"], ["config map: theta_deg = 120 deg", "-90 to 90 deg"]),
    ("map-rhog", ["map", "fluids.rhog=900"], ["fluids.rhog = 900 kg/m3", "0.01 to 500 kg/m3"]),
    ("audit-k-sigma", ["audit", "lab.csv", "--no-health", "checks.k_sigma=0"], ["config audit: checks.k_sigma = 0", "a number > 0"]),
    ("audit-grid-n", ["audit", "lab.csv", "grid.n_map=1"], ["grid.n_map = 1", "whole number >= 2"]),
    ("check-data-format", ["check-data", "lab.csv", "table_format=xls"], ["table_format = 'xls'", "csv, parquet"]),
    ("evaluate-holdout", ["evaluate", "holdout=validation"], ["config evaluate: holdout = 'validation'", "test, development"]),
    ("evaluate-kfold", ["evaluate", "kfold.k=1"], ["kfold.k = 1", "0 (off) or a whole number >= 2"]),
    ("demo-members", ["demo", "ensemble_members=-1"], ["config demo: ensemble_members = -1", "whole number >= 0"]),
]


#: a design YAML given to fit: refused with the nearest name, but fit has made its run folder by then
FIT_DESIGN_CASES = [
    ("fit-design-variable", ["fit", "campaign.csv", "--design", "design_var_typo.yaml"],
     ["unknown variable 'vsgg'", "did you mean 'vsg'"]),
    ("fit-design-unit-key", ["fit", "campaign.csv", "--design", "design_unit_typo.yaml"],
     ["variables.D", "unknown key 'unti'", "did you mean 'unit'"]),
]


def _assert_refused(capsys, work: Path, argv, fragments, run_folder_left: bool = False):
    rc = main(list(argv))
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert rc == 2, (rc, err)
    assert len(lines) == 1, err
    assert "Traceback" not in err and "Traceback" not in out
    for frag in fragments:
        assert frag in lines[0], (frag, lines[0])
    runs = work / "runs"
    if not run_folder_left:
        assert not runs.exists() or not any(runs.iterdir()), list(runs.iterdir())
    assert not (work / ERROR_LOG).exists()
    return lines[0]


@pytest.mark.parametrize("argv,fragments", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_refused_with_one_line(work, capsys, argv, fragments):
    _assert_refused(capsys, work, argv, fragments)


@pytest.mark.parametrize("argv,fragments", [c[1:] for c in FIT_DESIGN_CASES], ids=[c[0] for c in FIT_DESIGN_CASES])
def test_a_misspelled_design_file_is_refused(work, capsys, argv, fragments):
    _assert_refused(capsys, work, argv, fragments)


def test_a_refused_design_file_leaves_no_run_folder(work, capsys):
    _assert_refused(capsys, work, *FIT_DESIGN_CASES[0][1:])


def test_case_count():
    """The brief asks for at least 25 cases through the CLI."""
    assert len(CASES) + len(FIT_DESIGN_CASES) >= 25


def test_the_good_files_of_the_cases_pass(work, capsys):
    """The refused YAML files differ from accepted ones by the one misspelling."""
    from closure_nn.data.design_space import parse_design
    from closure_nn.line.definition import load_line

    assert load_line(work / "line_ok.yaml").fluid.sigma == 0.02
    assert parse_design(OmegaConf.to_container(OmegaConf.create(DESIGN_OK))).dimensions == ("vsl", "vsg", "D")
    assert main(FIT + ["--config-dir", "mine", "model=wide", "--show-config"]) == 0
    assert "- 128" in capsys.readouterr().out


# ------------------------------------------------------------------ the shipped configs pass

VARIANTS = [("train", o) for o in (["model=direct"], ["model=interface"], ["model=shared"], ["loss=data_only"],
                                   ["trainer=ddp"], ["closure=learned", "closure.path=some_bundle"])] + \
           [("synth", [f"design={d}"]) for d in ("custom", "demo_loop", "demo_loop_and_line", "wide")] + \
           [(n, []) for n in RULES]


@pytest.mark.parametrize("name,overrides", VARIANTS, ids=[f"{n}-{'-'.join(o) or 'default'}" for n, o in VARIANTS])
def test_every_shipped_config_passes(name, overrides):
    check_config(load_config(name, overrides), name)  # load_config checks; again explicitly


def test_every_config_has_a_rule_table_and_every_registry_resolves():
    assert {p.stem for p in CONF_DIR.glob("*.yaml")} == set(RULES)
    for table in RULES.values():
        for rule in table.values():
            for r in (rule, getattr(rule, "value", None), getattr(rule, "item", None)):
                if isinstance(r, Choice):
                    assert len(r.names()) >= 1
                if isinstance(r, MapOf) and r.keys is not None:
                    assert len(_registry(r.keys)) >= 1


def test_a_bad_value_in_a_user_config_folder_is_refused(tmp_path):
    (tmp_path / "solver").mkdir()
    (tmp_path / "solver" / "fast.yaml").write_text("select: thinnest\nentrainment: 0.0\nn_grid: 3\ns_wave: 0.01\n")
    with pytest.raises(InputError, match=r"config point: solver.n_grid = 3: expected a whole number >= 4"):
        load_config("point", ["solver=fast"], config_dir=tmp_path)


# ------------------------------------------------------------------ resume

@pytest.fixture
def old_run(work):
    """A run folder as closure-nn train leaves it: the resolved config.yaml and a checkpoint
    (an empty file: the config is checked before the checkpoint is read)."""
    run = work / "old_run"
    (run / "checkpoints").mkdir(parents=True)
    cfg = load_config("train", ["data.train=lab.csv", "trainer.max_epochs=4", "trainer.batch_size=16",
                                "trainer.patience=2"])
    OmegaConf.save(cfg, run / "config.yaml", resolve=True)
    (run / "checkpoints" / "last.ckpt").write_bytes(b"")
    return run


def test_resume_with_a_changed_seed_is_refused(work, old_run, capsys):
    saved = (old_run / "config.yaml").read_bytes()
    line = _assert_refused(capsys, work, ["train", "resume=old_run/checkpoints/last.ckpt", "seed=5",
                                          "trainer.lr=0.01"], ["resume", "seed (0 -> 5)", "trainer.lr (0.003 -> 0.01)",
                                                               "trainer.max_epochs"])
    assert "config.yaml" in line
    assert (old_run / "config.yaml").read_bytes() == saved


def test_resume_with_a_misspelled_key_names_the_nearest(work, old_run, capsys):
    _assert_refused(capsys, work, ["train", "resume=old_run/checkpoints/last.ckpt", "trainer.max_epoch=9"],
                    ["unknown key 'trainer.max_epoch'", "did you mean 'trainer.max_epochs'"])


def test_resume_with_a_bad_safe_value_is_refused(work, old_run, capsys):
    _assert_refused(capsys, work, ["train", "resume=old_run/checkpoints/last.ckpt", "trainer.max_epochs=0"],
                    ["trainer.max_epochs = 0", "whole number >= 1"])


def test_resume_may_change_the_safe_keys(work, old_run, capsys):
    argv = ["train", "resume=old_run/checkpoints/last.ckpt", "trainer.max_epochs=40", "trainer.progress_bar=false",
            "trainer.num_threads=2", "data.train=lab.csv", "--show-config"]
    assert main(argv) == 0, capsys.readouterr().err
    out = OmegaConf.create(capsys.readouterr().out)
    assert out.trainer.max_epochs == 40 and out.trainer.num_threads == 2 and out.seed == 0


def test_changed_keys_lists_every_difference_but_the_safe_ones():
    a = {"seed": 0, "trainer": {"max_epochs": 5, "lr": 0.01, "num_threads": 1}, "data": {"replay": []}, "resume": None}
    b = {"seed": 0, "trainer": {"max_epochs": 50, "lr": 0.02, "num_threads": 2}, "data": {"replay": ["x.csv"]},
         "resume": "r.ckpt"}
    assert changed_keys(a, b) == [("data.replay", [], ["x.csv"]), ("trainer.lr", 0.01, 0.02)]
