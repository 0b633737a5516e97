"""What ``rollrig train`` does, method by method, and the files it writes."""

from __future__ import annotations

from pathlib import Path

from ..errors import UserInputError
from ..scenario import Scenario
from .session import TrainResult, load_checkpoint, policy_meta, run_ars

__all__ = ["train_ars", "train_sb3", "finish", "checkpoint_path"]


def checkpoint_path(out_dir: Path) -> Path:
    """Where a session keeps its checkpoint: beside the output folder (it outlives an interruption)."""
    out_dir = Path(out_dir)
    return out_dir.with_name(f"{out_dir.name}.checkpoint.npz")


class _Progress:
    """A rich progress bar showing the mean return and the criteria pass rate."""

    def __init__(self, total: int, stream, label: str, done: int = 0) -> None:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

        self.bar = Progress(
            TextColumn(label),
            BarColumn(),
            MofNCompleteColumn(),
            TextColumn("{task.fields[status]}"),
            TimeElapsedColumn(),
            console=Console(file=stream, stderr=False),
            transient=True,
        )
        self.task = self.bar.add_task(label, total=total, completed=done, status="")
        self.rate = "—"

    def __enter__(self):
        self.bar.__enter__()
        return self

    def __exit__(self, *exc):
        return self.bar.__exit__(*exc)

    def update(self, row: dict) -> None:
        if row.get("pass_rate") is not None:
            self.rate = f"{100 * row['pass_rate']:.0f} %"
        status = f"return {row['mean_return']:.1f}  criteria passed {self.rate}"
        self.bar.update(self.task, completed=row["iteration"], status=status)


def train_ars(sc: Scenario, args, ranges: dict, hidden: tuple[int, ...], out_dir: Path, stream):
    """ARS session with checkpoints beside the output folder (or continuing ``args.resume``)."""
    from .ars import ARSConfig, make_ars

    try:
        cfg = ARSConfig(
            directions=args.directions,
            top=args.top,
            step_size=args.step_size,
            noise=args.noise,
            hidden=hidden,
        )
    except ValueError as exc:
        raise UserInputError(f"ARS settings: {exc}") from None
    ars = make_ars(sc, cfg, args.seed, randomize=ranges, history=args.history)
    meta = policy_meta(
        sc,
        ars.env.layout,
        "ars",
        args.seed,
        {
            "ars": {
                "directions": cfg.directions,
                "top": cfg.top,
                "step_size": cfg.step_size,
                "noise": cfg.noise,
            },
            "hidden": list(hidden),
            "randomize": {k: list(v) for k, v in ranges.items()},
        },
    )
    history: list[dict] = []
    ckpt = checkpoint_path(out_dir)
    if args.resume is not None:
        arrays, saved = load_checkpoint(args.resume)
        for key in ("scenario_sha256", "algorithm", "seed", "ars", "hidden", "randomize", "observation"):
            if saved.get(key) != meta.get(key):
                raise UserInputError(
                    f"{args.resume}: checkpoint was made with another {key.replace('_', ' ')}; "
                    "allowed: the same scenario and training options"
                )
        try:
            ars.load_state(arrays)
        except (ValueError, KeyError) as exc:
            raise UserInputError(f"{args.resume}: {exc}") from None
        history = saved.get("history", [])
        ckpt = Path(args.resume)
    meta["checkpoint"] = str(ckpt)
    with _Progress(args.iterations, stream, "ARS", done=ars.iteration) as bar:
        result = run_ars(
            ars,
            sc,
            iterations=args.iterations,
            checkpoint=ckpt,
            checkpoint_meta=meta,
            eval_every=args.eval_every,
            eval_runs=args.eval_runs,
            cpu_budget_s=args.cpu_s,
            on_progress=bar.update,
            history=history,
        )
    meta["iterations"] = ars.iteration
    return result, meta


def train_sb3(sc: Scenario, args, ranges: dict, hidden: tuple[int, ...], out_dir: Path, stream):
    """PPO or SAC through stable-baselines3 (the ``rl`` extra); checkpoints as for ARS."""
    from .sb3 import train_sb3_policy

    ckpt = Path(args.resume) if args.resume is not None else checkpoint_path(out_dir)
    result, layout, extra = train_sb3_policy(
        sc,
        args.algo,
        steps=args.steps,
        seed=args.seed,
        ranges=ranges,
        hidden=hidden or (64, 64),
        history=args.history,
        eval_runs=args.eval_runs,
        checkpoint=ckpt,
        resume=args.resume,
        cpu_budget_s=args.cpu_s,
    )
    meta = policy_meta(
        sc, layout, args.algo, args.seed, dict(extra, randomize={k: list(v) for k, v in ranges.items()})
    )
    if result.checkpoint_step is not None:
        meta["checkpoint"] = str(ckpt)
    return result, meta


def finish(sc: Scenario, args, result: TrainResult, meta: dict, out_dir: Path):
    """Judge the trained policy on the whole Monte Carlo set; write the output folder."""
    import tomlkit
    from rollrig.controllers.policy import ObservationLayout, save_policy

    from ..report.outdir import manifest, output_folder, write_json
    from ..report.run_tables import run_tables
    from ..report.table import render
    from ..report.train_tables import LEARNED_CAUTION, history_table, write_history_csv
    from .evaluate import judge_policy

    layout = ObservationLayout(history=meta["observation"]["history"], gyro=meta["observation"]["gyro"])
    outcome = judge_policy(sc, result.net, layout)
    tables = [history_table(result.history, meta["algorithm"]), *run_tables(outcome)]
    meta = {k: v for k, v in meta.items() if k != "checkpoint"}
    with output_folder(out_dir, force=args.force) as tmp:
        save_policy(tmp / "policy.npz", result.net, meta)
        write_history_csv(tmp / "history.csv", result.history)
        (tmp / "metrics.md").write_text(render(tables, "md"))
        doc = tomlkit.parse(Path(sc.path).read_text(encoding="utf-8"))
        ctrl = tomlkit.table()
        ctrl.add(tomlkit.comment(f"trained by rollrig train --algo {meta['algorithm']}; {LEARNED_CAUTION}"))
        ctrl["kind"] = "policy"
        ctrl["rate_hz"] = float(sc.controller.rate_hz)
        ctrl["file"] = "policy.npz"
        doc["controller"] = ctrl
        (tmp / "policy-scenario.toml").write_text(tomlkit.dumps(doc))
        write_json(
            tmp / "manifest.json",
            manifest(
                scenario_path=sc.path,
                scenario_sha256=sc.sha256,
                seed=args.seed,
                runs=range(sc.run.runs),
                command_line=getattr(args, "command_line", None),
                extra={
                    "policy": meta,
                    "cpu_s": result.cpu_s,
                    "criteria_pass_rate": float(outcome.all_passed.mean()),
                },
            ),
        )
    return tables, out_dir
