"""Sweeps of ``train(cfg)`` with Hydra's multirun: one job per combination of swept values.

Hydra's own sweeper and launcher run the jobs (by default the basic sweeper: the cartesian
product of comma-separated values, ``range(...)`` and ``choice(...)``; jobs one after the other
in this process). From the command line::

    closure-nn train --sweep 'model.hidden=[16,16],[32,32]' seed=0,1 data.train=table.csv
    python -m closure_nn.training.sweep -m 'model.hidden=[16,16],[32,32]' seed=0,1 data.train=table.csv

Folders (``run_root`` defaults to ``runs``)::

    <run_root>/sweep-<YYYYmmdd-HHMMSS>/      hydra.sweep.dir
        multirun.yaml                        Hydra: the sweep's config
        summary.csv, summary.md              one row per job (rewritten after every job)
        0/ 1/ ...                            hydra.sweep.subdir = job number
            .hydra/                          Hydra: config, hydra config, overrides of the job
            train.log                        Hydra: the job's log
            job.json                         status, overrides, objective, error of the job
            train/                           the job's run folder (config.yaml, metrics, bundle/)

The composed config is ``conf/train.yaml`` (through the small wrapper ``train_sweep`` that sets
only ``hydra.*`` keys: the folders above, no change of working directory, the summary callback).
Each job returns the best value of ``trainer.monitor`` (validation loss by default; ensembles: the
mean over members), so a sweeper that minimises a returned value can drive it.

As Hydra does, a failed job fails the sweep after all jobs have run; its row in the summary says
``failed`` with the error.

Lightning (closure_nn.training.run) is imported inside :func:`job`, which runs in the Hydra app:
planning and checking the jobs does not load it.
"""
from __future__ import annotations

import contextlib
import csv
import itertools
import json
import logging
import math
import sys
from pathlib import Path
from typing import Any, Iterator

import hydra
from hydra.core.config_store import ConfigStore
from hydra.core.hydra_config import HydraConfig
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.core.utils import JobStatus
from hydra.errors import HydraException
from hydra.experimental.callback import Callback
from hydra.types import RunMode
from omegaconf import DictConfig, OmegaConf

from ..caution import CAUTION
from ..config import CONF_DIR, load_config, require_complete
from ..physics.checks import InputError
from ..run_folder import write_json

log = logging.getLogger("closure_nn.training.sweep")

#: name of the primary config registered in Hydra's ConfigStore (wraps conf/train.yaml)
SWEEP_CONFIG = "train_sweep"
#: Hydra version base of the entry point (1.3: no change of working directory by default)
VERSION_BASE = "1.3"
JOB_FILE = "job.json"
RUN_NAME = "train"
NO_RESUME = "train --sweep: resume continues one run; it cannot be swept (drop resume=...)"


def _register() -> None:
    """Store the ``train_sweep`` primary config: conf/train.yaml plus our ``hydra.*`` settings."""
    ConfigStore.instance().store(name=SWEEP_CONFIG, node={
        "defaults": ["train", "_self_"],
        "hydra": {
            "job": {"name": "train", "chdir": False},
            "run": {"dir": "${run_root}/sweep-${now:%Y%m%d-%H%M%S}"},
            "sweep": {"dir": "${run_root}/sweep-${now:%Y%m%d-%H%M%S}", "subdir": "${hydra.job.num}"},
            "callbacks": {"sweep_summary": {"_target_": "closure_nn.training.sweep.SweepSummary"}},
        },
    })


def objective(metrics: dict, monitor: str) -> float:
    """Best value of the monitored metric in ``train(cfg)``'s metrics; ensembles: member mean."""
    key = f"best_{monitor.replace('/', '_')}"
    values = [m.get(key, math.nan) for m in metrics.get("members", [metrics])]
    return float(sum(values) / len(values)) if values else math.nan


def job(cfg: DictConfig) -> float:
    """One sweep job: ``train(cfg)`` with its run folder inside the Hydra job's output folder.

    Returns the best value of ``cfg.trainer.monitor`` (:func:`objective`).
    """
    from .run import train  # imports Lightning

    if cfg.resume:
        raise InputError(NO_RESUME)
    require_complete(cfg, "train")
    out = Path(HydraConfig.get().runtime.output_dir)
    cfg.run_root, cfg.run_name = str(out), RUN_NAME
    metrics = train(cfg)
    value = objective(metrics, cfg.trainer.monitor)
    log.info("best %s = %.6g; run folder %s", cfg.trainer.monitor, value, metrics["run_dir"])
    return value


def _app():
    """The ``@hydra.main`` entry point over conf/ (built when called, so that Hydra's global
    version base is set right before the run and not at import)."""
    _register()
    return hydra.main(config_path=str(CONF_DIR), config_name=SWEEP_CONFIG, version_base=VERSION_BASE)(job)


# ---------------------------------------------------------------- planning (before any job runs)

def _is_hydra_key(key: str) -> bool:
    """``hydra.<key>`` or a ``hydra/<group>`` choice (with or without ``+``, ``++``, ``~``)."""
    key = key.lstrip("+~")
    return key == "hydra" or key.startswith(("hydra.", "hydra/"))


def plan(overrides: list[str]) -> list[list[str]] | None:
    """The jobs Hydra's basic sweeper will launch: one override list per combination, in its
    order (cartesian product, first swept key slowest). ``None`` when another sweeper is chosen
    (``hydra/sweeper=...``) or a sweep needs the config tree (``glob(...)``).

    >>> plan(["seed=0,1", "model.hidden=[4],[8]", "trainer.max_epochs=2"])[1]
    ['seed=0', 'model.hidden=[8]', 'trainer.max_epochs=2']
    """
    try:
        parsed = OverridesParser.create().parse_overrides(list(overrides))
    except HydraException as exc:
        raise InputError(f"train --sweep: {str(exc).splitlines()[0]}") from None
    if any(o.get_key_element().lstrip("+~") == "hydra/sweeper" for o in parsed):
        return None
    choices: dict[str, list[str]] = {}
    for o in parsed:
        key = o.get_key_element()
        if not o.is_sweep_override():
            choices[key] = [f"{key}={o.get_value_element_as_str()}"]
        elif o.is_discrete_sweep():
            try:
                choices[key] = [f"{key}={v}" for v in o.sweep_string_iterator()]
            except Exception:  # glob(...) lists the config group: left to Hydra
                return None
        else:
            raise InputError(f"train --sweep: {o.input_line}: the basic sweeper takes comma-separated values, "
                             "range(...) or choice(...), not interval(...)")
    return [list(c) for c in itertools.product(*choices.values())]


def check_jobs(jobs: list[list[str]]) -> None:
    """Compose every job's config; raise :class:`InputError` for the first one that fails or
    still has a ``???`` value, before any job runs."""
    for n, overrides in enumerate(jobs):
        cfg = load_config("train", [o for o in overrides if not _is_hydra_key(o.split("=", 1)[0])])
        if cfg.resume:
            raise InputError(NO_RESUME)
        try:
            require_complete(cfg, "train")
        except InputError as exc:
            raise InputError(f"sweep job {n} ({' '.join(overrides)}): {exc}") from None


# ---------------------------------------------------------------- running

@contextlib.contextmanager
def restored_logging() -> Iterator[None]:
    """Put the root logger's handlers and level back afterwards (Hydra sets up logging for each
    job; the handlers it added are closed)."""
    root = logging.getLogger()
    old_handlers, old_level = list(root.handlers), root.level
    try:
        yield
    finally:
        for h in list(root.handlers):
            if h not in old_handlers:
                root.removeHandler(h)
                h.close()
        for h in old_handlers:
            if h not in root.handlers:
                root.addHandler(h)
        root.setLevel(old_level)


@contextlib.contextmanager
def _hydra_argv(argv: list[str]) -> Iterator[None]:
    """``hydra.main`` reads ``sys.argv``: give it ``argv``, put it and the logging back afterwards."""
    old_argv = sys.argv
    sys.argv = argv
    try:
        with restored_logging():
            yield
    finally:
        sys.argv = old_argv


def run_sweep(overrides: list[str], prog: str = "closure-nn train --sweep") -> int:
    """Run Hydra's multirun of :func:`job` over ``overrides`` (Hydra's override syntax).

    Returns 0, or Hydra's exit code when a job or the composition failed (Hydra has printed why).
    """
    app = _app()
    with _hydra_argv([prog, "--multirun", *overrides]):
        try:
            app()
        except SystemExit as exc:  # Hydra exits on errors after reporting them
            return int(exc.code) if isinstance(exc.code, int) else 1
    return 0


# ---------------------------------------------------------------- summary

class SweepSummary(Callback):
    """Hydra callback: after every job write its ``job.json`` and rewrite the sweep summary;
    after the sweep print the summary table."""

    def on_job_end(self, config: DictConfig, job_return: Any, **kwargs: Any) -> None:
        if config.hydra.mode != RunMode.MULTIRUN:
            return
        record: dict[str, Any] = {"job": int(config.hydra.job.num), "overrides": list(job_return.overrides or []),
                                  "status": "completed" if job_return.status == JobStatus.COMPLETED else "failed",
                                  "objective": None, "error": None}
        try:
            value = job_return.return_value  # raises the job's exception if it failed
            record["objective"] = float(value) if value is not None else None
        except Exception as exc:
            record["error"] = f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
        write_json(Path(config.hydra.runtime.output_dir) / JOB_FILE, record)
        write_summary(Path(config.hydra.sweep.dir))
        if record["error"]:
            log.error("sweep job %d failed (%s); the sweep fails after all jobs", record["job"], record["error"])

    def on_multirun_end(self, config: DictConfig, **kwargs: Any) -> None:
        sweep_dir = Path(config.hydra.sweep.dir)
        rows = write_summary(sweep_dir)
        print(markdown_table(rows))
        print(f"sweep folder {sweep_dir}: summary.csv, summary.md")
        print(CAUTION)


def _last_logged(run_dir: Path, monitor: str) -> float:
    """Last epoch's ``monitor`` in Lightning's CSV logs under ``run_dir`` (ensembles: member mean)."""
    values = []
    for path in sorted(run_dir.glob("**/logs/version_*/metrics.csv")):
        with open(path, newline="") as fh:
            last = [r[monitor] for r in csv.DictReader(fh) if r.get(monitor)]
        if last:
            values.append(float(last[-1]))
    return sum(values) / len(values) if values else math.nan


def _run_numbers(run_dir: Path) -> dict[str, Any]:
    metrics = json.loads((run_dir / "metrics.json").read_text())
    monitor = str(OmegaConf.load(run_dir / "config.yaml").trainer.monitor)
    members = metrics.get("members", [metrics])

    def mean(get) -> float:
        v = [get(m) for m in members]
        return sum(v) / len(v)

    return {"monitor": monitor, "epochs": max(int(m["epochs"]) for m in members),
            "best": objective(metrics, monitor), "final": _last_logged(run_dir, monitor),
            "val_holdup_rmse": mean(lambda m: m["val"]["holdup_rmse"]),
            "val_pgrad_rel_rmse": mean(lambda m: m["val"]["pgrad_rel_rmse"]),
            "fit_seconds": sum(float(m["fit_seconds"]) for m in members)}


def summarize(sweep_dir: str | Path) -> list[dict[str, Any]]:
    """One row per job folder of a sweep: job number, the overrides that differ between jobs
    (one column each), status, epochs, best and last-epoch monitored value, validation holdup RMSE
    and pgrad relative RMS error (best checkpoint), fit time, run folder, error."""
    sweep_dir = Path(sweep_dir)
    jobs = []
    for over in sweep_dir.glob("*/.hydra/overrides.yaml"):
        folder = over.parent.parent
        record = json.loads((folder / JOB_FILE).read_text()) if (folder / JOB_FILE).exists() else {}
        num = record.get("job", OmegaConf.load(folder / ".hydra" / "hydra.yaml").hydra.job.num)
        pairs = dict(o.split("=", 1) for o in OmegaConf.to_container(OmegaConf.load(over)))
        jobs.append((int(num), folder, record, pairs))
    jobs.sort(key=lambda j: j[0])
    keys = list(dict.fromkeys(k for _, _, _, p in jobs for k in p))
    varying = [k for k in keys if len({p.get(k) for _, _, _, p in jobs}) > 1]
    rows = []
    for num, folder, record, pairs in jobs:
        row: dict[str, Any] = {"job": num, **{k: pairs.get(k, "") for k in varying},
                               "status": record.get("status", "not finished")}
        runs = sorted(folder.glob("*/metrics.json"), key=lambda p: p.stat().st_mtime)
        if runs:
            row.update(_run_numbers(runs[-1].parent))
            row["run_folder"] = str(runs[-1].parent.relative_to(sweep_dir))
        row["error"] = record.get("error") or ""
        rows.append(row)
    return rows


def _table(rows: list[dict[str, Any]]) -> tuple[list[str], list[list[Any]]]:
    """Header and cells of the summary: ``best``/``final`` named after the monitor when all jobs
    share it, the error column only when a job failed."""
    cols = list(dict.fromkeys(k for r in rows for k in r))
    monitors = {r["monitor"] for r in rows if "monitor" in r}
    names = {c: c for c in cols}
    if len(monitors) == 1:
        m = monitors.pop()
        cols.remove("monitor")
        names.update(best=f"best {m}", final=f"final {m}")
    if not any(r.get("error") for r in rows):
        cols.remove("error")
    return [names[c] for c in cols], [[r.get(c, "") for c in cols] for r in rows]


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        return "nan" if math.isnan(v) else f"{v:.4g}"
    return str(v)


def markdown_table(rows: list[dict[str, Any]]) -> str:
    """The summary rows as a Markdown table (4 significant digits), with the best job named."""
    if not rows:
        return "(no sweep jobs)"
    header, cells = _table(rows)
    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(_fmt(v) for v in row) + " |" for row in cells]
    done = [r for r in rows if isinstance(r.get("best"), float) and not math.isnan(r["best"])]
    if done:
        b = min(done, key=lambda r: r["best"])
        lines.append(f"\nlowest best {b['monitor']}: job {b['job']}, run folder {b['run_folder']}")
    return "\n".join(lines)


def write_summary(sweep_dir: str | Path) -> list[dict[str, Any]]:
    """Write ``summary.csv`` and ``summary.md`` into the sweep folder; return the rows."""
    sweep_dir = Path(sweep_dir)
    rows = summarize(sweep_dir)
    header, cells = _table(rows) if rows else ([], [])
    with open(sweep_dir / "summary.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(cells)
    (sweep_dir / "summary.md").write_text(f"# Sweep {sweep_dir.name}\n\n{markdown_table(rows)}\n\n{CAUTION}\n")
    return rows


def main() -> None:
    """``python -m closure_nn.training.sweep -m key=a,b ...`` (Hydra's own command line)."""
    _app()()


if __name__ == "__main__":  # pragma: no cover
    main()
