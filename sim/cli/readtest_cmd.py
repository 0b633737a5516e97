"""``rollrig read-test FILE``: characterise an image reader and fit the camera model from it."""

from __future__ import annotations

import argparse
from pathlib import Path

from rollrig.sim.cli.common import (
    add_force_option,
    add_format_option,
    print_tables,
    say_written,
    status_stream,
)

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    p = sub.add_parser(
        "read-test",
        help="characterise an image reader over bank, degradation kind and strength; fit [sensor]",
        description="Render the attitude instrument at many bank angles, degrade the pictures as a camera "
        "would (noise, lighting, pose, optics), read them, report the reading errors per condition, rank "
        "the degradations, and write the statistical [sensor] model fitted at each operating condition.",
    )
    p.add_argument(
        "file", metavar="FILE", help="scenario with an optional [read_test] section, or [read_test] alone"
    )
    p.add_argument(
        "--reader",
        help="moment | robust | onnx:FILE.onnx | python:module:function (overrides [read_test] reader)",
    )
    p.add_argument("--draws", type=int, help="random draws per condition (overrides [read_test] draws)")
    p.add_argument("--seed", type=int, help="seed (overrides [read_test] seed)")
    p.add_argument(
        "--loop-runs",
        type=int,
        metavar="N",
        help="also run N runs of the image-level closed loop at the first operating condition and compare "
        "them with the fitted model (needs a scenario)",
    )
    p.add_argument("--allow-code", action="store_true", help="allow a python: reader (runs your code)")
    add_format_option(p)
    p.add_argument(
        "--out", type=Path, metavar="DIR", help="output folder (default rollrig-runs/read-test-<file>-<time>)"
    )
    add_force_option(p)
    p.add_argument("--no-files", action="store_true", help="print the tables only, write no folder")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from dataclasses import replace

    from rollrig.sim.analysis.read_test import fitted_scenario, load_read_test, make_reader, run_read_test
    from rollrig.sim.errors import UserInputError
    from rollrig.sim.report import read_test_report as rep
    from rollrig.sim.report.outdir import check_out_dir, default_out_dir, manifest, output_folder, write_json
    from rollrig.sim.report.table import render

    rt = load_read_test(args.file)
    spec = rt.spec
    if args.reader is not None:
        spec = replace(spec, reader=args.reader)
    if args.draws is not None:
        if not 1 <= args.draws <= 10_000:
            raise UserInputError(f"--draws {args.draws}: allowed: 1 ≤ draws ≤ 10000")
        spec = replace(spec, draws=args.draws)
    if args.seed is not None:
        if args.seed < 0:
            raise UserInputError(f"--seed {args.seed}: allowed: seed ≥ 0")
        spec = replace(spec, seed=args.seed)
    if args.loop_runs is not None:
        if rt.scenario is None:
            raise UserInputError(f"{args.file}: --loop-runs needs a scenario around the [read_test] section")
        if not 2 <= args.loop_runs <= 10_000:
            raise UserInputError(
                f"--loop-runs {args.loop_runs}: allowed: 2 ≤ N ≤ 10000 (an interval needs 2)"
            )
    reader = make_reader(
        spec.reader, spec.size_px, allow_code=args.allow_code, base_dir=str(Path(args.file).parent)
    )
    out_dir = None
    if not args.no_files:
        out_dir = args.out or default_out_dir("read-test-" + Path(args.file).stem)
        check_out_dir(out_dir, args.force)
    res = run_read_test(spec, reader, reader_name=spec.reader)
    tables = [rep.condition_table(res), rep.ranking_table(res), rep.fit_table(res)]
    if args.loop_runs is not None:
        from rollrig.sim.analysis.image_loop import image_scenario, surrogate_fidelity

        fit = res.fits[0]
        sc_img = image_scenario(
            rt.scenario,
            reader,
            size_px=spec.size_px,
            colour=spec.colour,
            bits=spec.bits,
            degradations=((fit.kind, fit.strength),),
        )
        fid = surrogate_fidelity(sc_img, fitted_scenario(rt.scenario, fit), args.loop_runs)
        tables.append(rep.fidelity_table(fid, fit.kind, fit.strength))
    print_tables(tables, args.format)
    print(
        f"{sum(r.size for r in res.readings.values())} images read in {res.seconds:.1f} s",
        file=status_stream(args.format),
    )
    if out_dir is None:
        return 0
    from rollrig.sim.scenario_writer import write_scenario

    with output_folder(out_dir, force=args.force) as tmp:
        for fmt, ext in (("md", "md"), ("json", "json"), ("csv", "csv")):
            (tmp / f"read_test.{ext}").write_text(render(tables, fmt))
        rep.plot_error_vs_bank(res, tmp / "error_vs_bank.png")
        rep.plot_error_vs_strength(res, tmp / "error_vs_strength.png")
        rep.plot_montage(res, tmp / "montage.png")
        written = []
        for f in res.fits:
            name = f"sensor-{f.kind}-{f.strength:g}.toml"
            if rt.scenario is not None:
                write_scenario(fitted_scenario(rt.scenario, f), tmp / name, template=rt.template)
            else:
                (tmp / name).write_text(rep.sensor_section_text(f))
            written.append(name)
        write_json(
            tmp / "manifest.json",
            manifest(
                scenario_path=rt.path,
                scenario_sha256=rt.sha256,
                seed=spec.seed,
                runs=[],
                command_line=getattr(args, "command_line", None),
                extra={"command": "read-test", "reader": spec.reader, "fitted_scenarios": written},
            ),
        )
    say_written(out_dir, args.format)
    return 0
