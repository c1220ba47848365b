"""The rule table of every config (``conf/<name>.yaml``): dotted key -> rule
(:mod:`closure_nn.config_rule_types`). A key segment ``*`` matches any name (the rule of the parent
says which names are allowed). Allowed choices come from the code's own registries where they exist
(``'module:NAME'``, imported only when a config holds the key, so that the fast commands never
import Lightning or pandas). Physical inputs (map, audit grid) use the ranges of
:data:`closure_nn.physics.checks.RANGES`. A new config key needs a rule here.
"""
from __future__ import annotations

from collections.abc import Mapping

from .config_rule_types import (Axis, Choice, Described, Either, Flag, ListOf, MapOf, Number, Opaque, Rule, Text,
                                physical)
from .physics.checks import RANGES

NUM = Number()
POS = Number(0, open_lo=True)
NONNEG = Number(0)
WHOLE1 = Number(1, whole=True)
WHOLE0 = Number(0, whole=True)
SEED = Number(0, whole=True)
FRACTION = Number(0, 1, open_lo=True, open_hi=True)
FLAG = Flag()
PATH = Text("a path")
OPT_PATH = Text("a path", nullable=True)
NAME = Text("a name", nullable=True)
OUTPUTS = "closure_nn.closures.neural:OUTPUT_NAMES"
FEATURES = "closure_nn.physics.groups:FEATURE_NAMES"
STAGES = "closure_nn.training.choices:STAGES"
TERMS = "closure_nn.training.loss:TERMS"
SELECT = Choice("closure_nn.physics.holdup_roots:SELECT_RULES")


def _under(prefix: str, table: Mapping[str, Rule]) -> dict[str, Rule]:
    return {f"{prefix}.{k}": r for k, r in table.items()}


#: conf/closure/*.yaml (closure_nn.closures.registry.build_closure); the path rule of ``bundle``
#: is in :func:`_cross_checks`
CLOSURE = {
    "source": Choice("closure_nn.closures.registry:SOURCES"),
    "wall": Choice("closure_nn.closures.correlations:WALL", what="wall friction correlation"),
    "interface": Choice("closure_nn.closures.correlations:INTERFACE", what="interface friction correlation"),
    "annular_interface": Choice("closure_nn.closures.correlations:INTERFACE", what="interface friction correlation"),
    "interface_kwargs": MapOf(None, NUM),
    "path": PATH,
}
#: conf/solver/default.yaml (closure_nn.physics.point.solve_points)
SOLVER = {
    "select": SELECT,
    "entrainment": Described(Either((Number(0, 1, open_hi=True), Choice(("ishii_mishima",)))),
                             "a fraction in [0, 1) or ishii_mishima"),
    "n_grid": Number(4, whole=True),
    "s_wave": POS,
}
#: conf/model/*.yaml (closure_nn.closures.neural.NeuralClosure)
MODEL = {
    "mode": Choice("closure_nn.closures.neural:MODES"),
    "hidden": ListOf(WHOLE1, min_len=1),
    "activation": Choice("closure_nn.closures.neural:ACTIVATIONS"),
    "bound": Either((POS, MapOf(OUTPUTS, POS))),
    "direct_span": POS,
    "inputs": MapOf(OUTPUTS, ListOf(Choice(FEATURES), min_len=1, nullable=True), nullable=True),
    "learn": ListOf(Choice(OUTPUTS), min_len=1, nullable=True),
    "base_input": FLAG,
}
#: conf/loss/*.yaml (closure_nn.training.loss.LossSettings)
LOSS = {
    "weights": MapOf(TERMS, NONNEG),
    "prior_factors": MapOf(OUTPUTS, NONNEG),
    "default_holdup_sd": POS,
    "pgrad_rel_sd": NONNEG,
    "pgrad_sd_floor": Number(0, unit="Pa/m"),
    "pattern_margin": NONNEG,
    "pattern_tolerance": POS,
    "pattern_rows": Choice("closure_nn.training.loss:PATTERN_ROWS"),
    "prior_space": Choice("closure_nn.training.loss:PRIOR_SPACES"),
    "residual_robust_scale": Number(0, open_lo=True, nullable=True),
    "data_robust_scale": Number(0, open_lo=True, nullable=True),
    "effective_variance": FLAG,
    "select": SELECT,
    "n_grid": Number(4, whole=True),
}
_MONITORS = tuple(f"{p}/{k}" for p in ("val", "train") for k in
                  ("loss", "phase_residual", "combined_residual", "data_holdup", "data_pgrad", "pattern", "prior",
                   "smooth")) + ("val/holdup_rmse", "val/pgrad_rel_rmse")
#: conf/trainer/*.yaml (closure_nn.training.run)
TRAINER = {
    "max_epochs": Number(1, whole=True, nullable=True),
    "batch_size": Number(1, whole=True, nullable=True),
    "lr": POS,
    "weight_decay": NONNEG,
    "lr_schedule": Choice("closure_nn.training.choices:LR_SCHEDULES"),
    "lr_final_factor": NONNEG,
    "gradient_clip_val": Number(0, nullable=True),
    "monitor": Choice(_MONITORS),
    "monitor_rows": Number(1, whole=True, nullable=True),
    "patience": Number(0, whole=True, nullable=True),
    "min_delta": NONNEG,
    "deterministic": FLAG,
    "num_threads": WHOLE1,
    "progress_bar": FLAG,
    "log_every_n_steps": WHOLE1,
    "devices": WHOLE1,
    "strategy": Choice(("auto", "ddp")),
    "backend": Choice(("gloo",)),  # CPU only: the gloo process group
    "start_method": Choice(("spawn", "fork", "forkserver", "popen")),  # Lightning's DDP launchers
}
_STAGE_TRAINER = {"max_epochs": WHOLE1, "batch_size": WHOLE1, "patience": WHOLE0}

#: conf/train.yaml with its groups
TRAIN = {
    **_under("closure", CLOSURE), **_under("model", MODEL), **_under("loss", LOSS), **_under("trainer", TRAINER),
    "stage": Choice(STAGES),
    "seed": SEED,
    "init_bundle": OPT_PATH,
    "resume": OPT_PATH,
    "data.train": Text("a table path (CSV or Parquet)", nullable=True),
    "data.val": OPT_PATH,
    "data.val_fraction": FRACTION,
    "data.unknown_pattern": Choice("closure_nn.data.configurations:UNKNOWN_PATTERN_RULES"),
    "data.replay": ListOf(PATH),
    "data.replay_fraction": Number(0, 1, open_lo=True),
    "data.replay_weight": NONNEG,
    "finetune.lr_factor": POS,
    "finetune.freeze_layers": WHOLE0,
    "stage_trainer.*": Opaque("a stage name"),
    **_under("stage_trainer.*", _STAGE_TRAINER),
    "selection.min_gain": NONNEG,
    "selection.confidence": FRACTION,
    "selection.n_bootstrap": WHOLE1,
    "ensemble.members": WHOLE1,
    "ensemble.bootstrap": FLAG,
    "ensemble.processes": WHOLE1,
    "domain.max_points": WHOLE1,
    "domain.quantile": Number(0, 1, open_lo=True),
    "domain.factor": POS,
    "run_root": PATH,
    "run_name": NAME,
}
_WIDE_LIST = ListOf(NUM, min_len=1)

RULES: dict[str, dict[str, Rule]] = {
    "point": {**_under("closure", CLOSURE), **_under("solver", SOLVER), "threads": WHOLE1, "run_root": PATH},
    "check_data": {"run_root": PATH, "unknown_columns": Choice(("keep", "drop")),
                   "table_format": Choice(("csv", "parquet")), "unit_headers": FLAG},
    "synth": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "design": Opaque("a design space (closure_nn.data.design_space.parse_design)"),
        "n": WHOLE1, "seed": SEED, "chunk": WHOLE1, "table_format": Choice(("csv", "parquet")),
        "progress": FLAG, "threads": WHOLE1, "run_root": PATH, "run_name": NAME,
    },
    "train": TRAIN,
    "fit": {
        **TRAIN,
        "fit.synth.n": WHOLE1, "fit.synth.seed": SEED,
        "fit.margins.velocity": Number(1), "fit.margins.d_low": Number(0, 1, open_lo=True),
        "fit.margins.d_high": Number(1), "fit.margins.theta_deg": Number(0, 90, unit="deg"),
        "fit.margins.roughness": Number(1), "fit.margins.rhog": Number(1),
        "fit.margins.liquid": Number(0, 1, open_hi=True), "fit.margins.mul": Number(1),
        "fit.margins.mug": Number(0, 1, open_hi=True),
        "fit.search.trials": WHOLE0, "fit.search.seed": SEED, "fit.search.processes": WHOLE1, "fit.search.trial_max_epochs": Number(1, whole=True),
        "fit.search.space": Opaque("a mapping of config keys to {low, high, log} or {choices}"),
    },
    "evaluate": {
        **TRAIN, **_under("solver", SOLVER), **_under("kfold.trainer", TRAINER),
        "experiment.name": NAME, "experiment.seed": SEED, "experiment.lab": PATH,
        "experiment.corruptions": OPT_PATH, "experiment.exclude_corrupted": FLAG, "experiment.members": WHOLE1,
        "experiment.synth.design": Text("a design name (conf/design/<name>.yaml)"),
        "experiment.synth.n": WHOLE1, "experiment.synth.seed": SEED,
        "lab": PATH,
        "splits.random.enabled": FLAG, "splits.random.test_fraction": FRACTION, "splits.random.seed": SEED,
        "splits.grouped.enabled": FLAG, "splits.grouped.by": Choice("closure_nn.data.splits:GROUP_KEYS"),
        "splits.grouped.test_groups": ListOf(Either((NUM, Text()))), "splits.grouped.test_fraction": FRACTION,
        "splits.grouped.seed": SEED,
        "holdout": Choice(("test", "development")),
        "development.fraction": FRACTION, "development.seed": SEED,
        "kfold.k": Described(Either((Number(0, 0, whole=True), Number(2, whole=True))), "0 (off) or a whole number >= 2"),
        "kfold.seed": SEED,
        "scoring.holdup_floor": NONNEG, "scoring.pgrad_floor": Number(0, unit="Pa/m"), "scoring.oracle": FLAG,
        "boosted.enabled": FLAG,
        "blackbox.hidden": ListOf(WHOLE1, min_len=1), "blackbox.activation": Choice("closure_nn.closures.neural:ACTIVATIONS"),
        "blackbox.holdup_scale": POS, "blackbox.pgrad_scale": Number(0, open_lo=True, unit="Pa/m"),
        "plots": FLAG, "num_threads": WHOLE1, "processes": WHOLE1,
    },
    "audit": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "run_root": PATH, "truth": OPT_PATH, "health": FLAG,
        **_under("checks", {"k_robust": POS, "residual_sd_floor": NONNEG, "k_sigma": POS, "holdup_sd_default": POS,
                            "pgrad_sd_rel": NONNEG, "pgrad_sd_abs": Number(0, unit="Pa/m"), "model_holdup_sd": NONNEG,
                            "model_pgrad_rel": NONNEG, "model_pgrad_abs": Number(0, unit="Pa/m"),
                            "kh_margin": NONNEG}),
        **_under("grid", {
            **_under("fluids", {k: physical(k) for k in ("rhol", "rhog", "mul", "mug", "sigma")}),
            "D": ListOf(physical("D"), min_len=1), "theta_deg": ListOf(Number(-90, 90, unit="deg"), min_len=1),
            "roughness": physical("roughness"), "vsl": Axis(), "vsg": Axis(), "n_sweep": Number(2, whole=True),
            "roots_theta_deg": ListOf(Number(-90, 90, unit="deg"), min_len=1), "roots_vsl": Axis(),
            "roots_vsg": Axis(), "n_map": Number(2, whole=True), "tiny_rate": Number(0, open_lo=True, unit="m/s"),
            "n_rates": Number(2, whole=True), "n_frac": Number(2, whole=True), "base_rates": WHOLE1,
            "base_fracs": ListOf(FRACTION, min_len=1), "sweeps": ListOf(Choice("closure_nn.audit.health:SWEEPS"), min_len=1),
            "kink_jump": POS, "kink_ratio": POS, "roots_D": Number(*RANGES["D"][:2], nullable=True, unit="m"),
            "single_phase_tol": POS}),
    },
    "map": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "run_root": PATH, "learned": OPT_PATH, "D": physical("D"), "theta_deg": Number(-90, 90, unit="deg"),
        "roughness": physical("roughness"),
        **_under("fluids", {k: physical(k) for k in ("rhol", "rhog", "mul", "mug", "sigma", "g")}),
        "vsl": Axis(), "vsg": Axis(), "n": Number(2, whole=True), "data_D_rel": POS,
        "data_theta_deg": Number(0, unit="deg"),
    },
    "line": {
        **_under("closure", CLOSURE), **_under("solver", SOLVER),
        "line": Opaque("a line definition (closure_nn.line.definition)"),
        "compare": Opaque("a mapping of names to closure configs"),
        **_under("compare.*", CLOSURE),
        "ensemble": ListOf(PATH),
        **_under("march", {"tol": Number(0, open_lo=True, unit="Pa"), "max_halvings": WHOLE0,
                           "max_jump_halvings": WHOLE0, "sweep_tol": Number(0, open_lo=True, unit="Pa"),
                           "max_sweeps": WHOLE1, "outlet_tol": Number(0, open_lo=True, unit="Pa"),
                           "shooting": Choice(("newton", "brentq")), "max_stations": Number(2, whole=True),
                           "p_min": Number(0, open_lo=True, unit="Pa")}),
        "threads": WHOLE1, "plot": FLAG, "run_root": PATH,
    },
    "distill": {
        **_under("solver", SOLVER), "run_root": PATH,
        **_under("distill", {"level_factors": ListOf(POS, min_len=1), "max_terms": WHOLE1,
                             "penalty": Number(0, nullable=True), "sd_floor": POS, "min_states": WHOLE1,
                             "in_domain_only": FLAG}),
        "sample.n_fit": WHOLE1, "sample.n_grid": WHOLE0, "sample.seed": SEED,
        "development.fraction": FRACTION, "development.seed": SEED,
    },
    "plan": {
        **_under("solver", SOLVER), "run_root": PATH, "n": WHOLE1, "candidates": WHOLE1, "seed": SEED,
        **_under("weights", {"disagreement": NONNEG, "distance": NONNEG, "boundary": NONNEG}),
        "min_separation": Number(0, 1), "distance_cap": POS, "boundary_step": Number(1, open_lo=True),
    },
    "demo": {"run_root": PATH, "ensemble_members": WHOLE0, "ensemble_processes": WHOLE1,
             "evaluate_overrides": ListOf(Text("key=value")), "line_overrides": ListOf(Text("key=value")),
             "audit_overrides": ListOf(Text("key=value"))},
}
#: trainer settings a resumed run may change (they do not change the result of the epochs run)
RESUME_SAFE = ("trainer.max_epochs", "trainer.progress_bar", "trainer.num_threads")
