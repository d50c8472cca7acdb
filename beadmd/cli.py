"""The ``beadmd`` command line: it parses arguments and calls the library.

Any :class:`~beadmd.errors.BeadmdError` becomes a one-paragraph message on stderr and
exit code 2.
"""

from __future__ import annotations

import argparse
import math
import sys
import time

import numpy as np

from . import __version__
from .errors import BeadmdError, ConfigError, DataError


def _record_chain_sizes(sim, every: int):
    """Attach an observer recording per-chain Rg^2, Ree^2 and the kinetic temperature."""
    from .analysis.conformation import end_to_end, radius_of_gyration_squared

    starts = sim.system.chain_start
    rg2, ree2, temps = [], [], []

    def record(s) -> None:
        x = s.system.positions
        rg2.append(radius_of_gyration_squared(x, starts))
        ree2.append(np.sum(end_to_end(x, starts) ** 2, axis=1))
        temps.append(s.kinetic_temperature())

    sim.every(every, record)
    return rg2, ree2, temps


def _example(args: argparse.Namespace) -> int:
    """Short good-solvent study: <Rg^2>(N) of isolated Kremer-Grest chains under Langevin."""
    from .analysis.stats import average_over_columns, block_average
    from .build import chain_ensemble
    from .forces.field import ForceField
    from .integrate import LangevinBAOAB
    from .simulate import Simulation

    try:
        lengths = [int(v) for v in args.lengths.split(",")]
    except ValueError:
        raise ConfigError(f"--lengths = {args.lengths!r} is not allowed: comma-separated integers") from None
    if any(n < 2 for n in lengths):
        raise ConfigError(f"--lengths = {args.lengths!r} is not allowed: chain lengths >= 2")
    if args.replicas < 1:
        raise ConfigError(f"--replicas = {args.replicas} is not allowed: an integer >= 1")
    if args.steps < 400:
        raise ConfigError(
            f"--steps = {args.steps} is not allowed: at least 400 (one sample every 50 steps, "
            "and >= 8 samples for an error bar)"
        )
    print(f"beadmd {__version__}: isolated FENE+WCA chains (Kremer-Grest), d = 3, good solvent")
    print(
        f"BAOAB dt = 0.01, gamma = 0.5, kT = 1; {args.replicas} replicas per N; {args.steps} steps after "
        f"{args.steps // 5} of equilibration\n"
    )
    print(f"{'N':>5} {'<Rg^2>':>10} {'+/-':>8} {'<Ree^2>':>10} {'kT_kin':>8} {'M bead-steps/s':>15}")
    rows = []
    for n in lengths:
        system = chain_ensemble(args.replicas, n, 3, seed=args.seed + n)
        sim = Simulation(
            system, ForceField(), LangevinBAOAB(0.01, 0.5, 1.0), seed=args.seed, threads=args.threads
        )
        sim.advance(args.steps // 5)
        rg2, ree2, temps = _record_chain_sizes(sim, every=50)
        t0 = time.perf_counter()
        sim.advance(args.steps)
        wall = time.perf_counter() - t0
        rg = average_over_columns(np.array(rg2))
        re = average_over_columns(np.array(ree2))
        kt = block_average(np.array(temps))
        rows.append((n, rg))
        print(
            f"{n:>5} {rg.mean:>10.4f} {rg.sem:>8.4f} {re.mean:>10.3f} {kt.mean:>8.4f} "
            f"{system.n_beads * args.steps / wall / 1e6:>15.2f}"
        )
    if len(rows) >= 2:
        n = np.array([r[0] for r in rows], dtype=float)
        y = np.array([r[1].mean for r in rows])
        s = np.array([r[1].sem for r in rows]) / y
        coef, cov = np.polyfit(np.log(n), np.log(y), 1, w=1 / s, cov="unscaled")
        nu, err = coef[0] / 2, np.sqrt(cov[0, 0]) / 2
        print(
            f"\neffective exponent from <Rg^2> ~ N^(2 nu): nu = {nu:.3f} +/- {err:.3f} "
            "(short chains; ideal 0.5, Flory 0.6, 3D self-avoiding walk 0.5876)"
        )
    print(
        "kT_kin is the full-step kinetic temperature: BAOAB puts it below kT by about "
        "dt^2 <U''>/4 (~1.5 % here), while configurations are sampled far more accurately."
    )
    return 0


def _bench(args: argparse.Namespace) -> int:
    """Time the benchmark cases (or the scaling with size) and print a table or JSON."""
    import json

    from . import bench

    threads = bench.parse_threads(args.threads)
    cases = args.case if args.case or not args.scaling else []  # --scaling alone: no cases
    options = {"steps": args.steps, "scale": args.scale, "skin": args.skin, "repeats": args.repeats}
    bench.check_options(cases, threads, **options)
    if not args.json:
        print(bench.table_header(bench.machine(), args.skin), flush=True)
    show = None if args.json else (lambda record: print(bench.table_row(record), flush=True))
    document = bench.benchmark(cases, threads, scaling=args.scaling, report=show, **options)
    if args.json:
        print(json.dumps(document, indent=1))
    else:
        print("\n".join(bench.summary(document)))
    return 0


def _run(args: argparse.Namespace) -> int:
    """Carry out a run from an input file, or continue one (--resume)."""
    from . import runner
    from .io.config import load_config

    progress = "quiet" if args.quiet else args.progress
    if args.resume is not None:
        if args.input is not None or args.overwrite or args.output is not None:
            raise ConfigError(
                "--resume RUN_DIR continues a run from its own stored configuration: give no input "
                "file, --output or --overwrite with it"
            )
        result = runner.resume_run(args.resume, threads=args.threads, progress=progress)
    else:
        if args.input is None:
            raise ConfigError("beadmd run needs an input file (INPUT.toml) or --resume RUN_DIR")
        config = load_config(args.input)
        try:
            text = open(args.input, encoding="utf-8").read()
        except OSError:
            text = None
        result = runner.start_run(
            config,
            input_text=text,
            directory=args.output,
            overwrite=args.overwrite,
            threads=args.threads,
            progress=progress,
            command=["beadmd", *sys.argv[1:]],
        )
    if not args.quiet or result.status != "finished":
        print(runner.summary(result), file=sys.stderr if result.status != "finished" else sys.stdout)
    return {"finished": 0, "interrupted": 130}.get(result.status, 3)


def _window(text: str | None, name: str, kind=float):
    if text is None:
        return None
    try:
        low, high = (kind(v) for v in text.split(":"))
    except ValueError:
        from .errors import ConfigError

        raise ConfigError(f"{name} = {text!r} is not allowed: 'low:high', e.g. 4:16") from None
    return low, high


def _analyze(args: argparse.Namespace) -> int:
    """Analyse a run directory (or an MDAnalysis-readable pair) into a table and figures."""
    import os
    import shutil
    from pathlib import Path

    from .analysis import chains as chain_data
    from .analysis import report

    source = Path(args.source)
    q = None
    if args.q_min is not None or args.q_max is not None:
        if args.q_min is None or args.q_max is None or not (0 < args.q_min < args.q_max):
            raise ConfigError(
                f"--q-min/--q-max = {args.q_min}/{args.q_max} are not allowed: give both, 0 < q_min < q_max"
            )
        if args.q_points < 3:
            raise ConfigError(f"--q-points = {args.q_points} is not allowed: an integer >= 3")
        q = np.geomspace(args.q_min, args.q_max, args.q_points)
    if args.trajectory is None and source.is_dir():
        data = chain_data.from_run(source, stage=None if args.all_frames else "production")
        default_output = source / "analysis"
    else:
        data = chain_data.from_files(source, args.trajectory, chains=args.chains_from)
        if args.independent_chains:
            import dataclasses

            data = dataclasses.replace(data, independent_chains=True)
        default_output = Path("beadmd-analysis")
    data = data.select(
        start=args.start, stop=args.stop, step=args.step, chains=chain_data.parse_chain_selection(args.chains)
    )
    result = report.analyze(
        data,
        q=q,
        q_window=_window(args.q_window, "--q-window"),
        s_window=_window(args.s_window, "--s-window", int),
        bins=args.bins,
    )
    target = Path(args.output) if args.output else default_output
    if target.exists() and not args.overwrite:
        raise ConfigError(
            f"--output = {str(target)!r} is not allowed: it exists and is never overwritten; choose "
            "another with --output, or replace it with --overwrite"
        )
    staging = target.parent / f".{target.name}.partial-{os.getpid()}"
    staging.mkdir(parents=True)
    try:
        written = report.write_results(result, staging)
        if not args.no_figures:
            from .analysis.plots import write_figures

            written += write_figures(result, staging)
        if target.exists():
            shutil.rmtree(target)
        os.rename(staging, target)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    print(
        f"beadmd analyze: {data.source}: {result.info['frames_used']} frames x {data.n_chains} chains of N = "
        f"{result.info['beads_per_chain']}; errors from {result.info['error_route']}"
    )
    print(f"{'quantity':<36} {'value':>12} {'error':>10}  {'unit':<10} note")
    for r in result.rows:
        print(f"{r.quantity:<36} {r.value:>12.6g} {r.error:>10.3g}  {r.unit:<10} {r.note}")
    print(f"written to {str(target)!r}: " + ", ".join(p.name for p in written))
    return 0


def _study_and_report(
    sweep_dir, document: dict, kinds: list[str], *, leave_out_failing: bool = False
) -> tuple[list, object]:
    """Run the studies on a sweep's points, save study.json, write report.html.

    With ``leave_out_failing``, a study that cannot run on these points (DataError) is
    left out with a message on stderr and in study.json, and the report is written
    without it: the points' table and provenance are still worth having. Without it
    (``beadmd report --study KIND``) the error stops the command.
    """
    import json
    from pathlib import Path

    from .studies import run_study
    from .studies.report import write_report

    studies, left_out = [], {}
    for kind in kinds:
        try:
            studies.append(run_study(kind, document["points"]))
        except DataError as error:
            if not leave_out_failing:
                raise
            left_out[kind] = str(error)
            print(f"beadmd sweep: the {kind} study was left out: {error}", file=sys.stderr)
    values = {s.kind: {"values": s.values, "notes": s.notes} for s in studies}
    values.update({kind: {"left_out": message} for kind, message in left_out.items()})
    (Path(sweep_dir) / "study.json").write_text(json.dumps(values, indent=1, default=str) + "\n")
    return studies, write_report(sweep_dir, studies)


def _print_study_values(studies) -> None:
    for s in studies:
        shown = s.tables[:1]
        if s.kind == "theta" and len(s.tables[1].rows) > len(s.values["conditions"]):
            shown = s.tables[:2]  # the theta point per pair of chain lengths: its drift with N
        for table in shown:
            print(f"\n{s.kind}: {table.title}")
            print("  " + " | ".join(table.columns))
            for row in table.rows:
                print(
                    "  "
                    + " | ".join(
                        "" if v is None else (f"{v:.4g}" if isinstance(v, float) else str(v)) for v in row
                    )
                )
        for note in s.notes:
            print(f"  note: {note}")


def _sweep_plan(args: argparse.Namespace, sweep, threads: int) -> int:
    """Print what a sweep still costs (``--plan``); starts no run and writes nothing."""
    import os

    from .studies.plan import format_plan, plan_sweep

    if args.calibrate < 0:
        raise ConfigError(f"--calibrate = {args.calibrate} is not allowed: a number of steps >= 0")
    if args.rate is not None and not (math.isfinite(args.rate) and args.rate > 0):
        raise ConfigError(f"--rate = {args.rate} is not allowed: bead-steps per second > 0")
    if args.scheduler is not None:
        raise ConfigError("--plan is not allowed with --scheduler: it plans the local pool (use --workers)")
    workers = args.workers or sweep.workers or max(1, (os.cpu_count() or 1) // threads)
    rows = plan_sweep(sweep, calibrate_steps=args.calibrate, rate=args.rate, threads=threads)
    if threads > 1:
        print(f"  (points run with {threads} threads each; rates are per point)")
    print(format_plan(sweep, rows, workers))
    return 0


def _sweep(args: argparse.Namespace) -> int:
    """Carry out a sweep (local pool or Dask), then its study and the HTML report."""
    from .studies.sweep import load_sweep, run_sweep

    sweep = load_sweep(args.sweep, directory=args.output)
    import numba

    threads = sweep.threads_per_point if args.threads_per_point is None else args.threads_per_point
    limit = numba.config.NUMBA_NUM_THREADS
    if not 1 <= threads <= limit and args.scheduler is None:
        raise ConfigError(
            f"--threads-per-point (or threads_per_point) = {threads} is not allowed: an integer in "
            f"1..{limit} (NUMBA_NUM_THREADS of this machine)"
        )
    if threads < 1:
        raise ConfigError(f"--threads-per-point = {threads} is not allowed: an integer >= 1")
    if args.workers is not None and args.workers < 1:
        raise ConfigError(f"--workers = {args.workers} is not allowed: an integer >= 1")
    if args.plan:
        return _sweep_plan(args, sweep, threads)
    if args.calibrate or args.rate is not None:
        raise ConfigError("--calibrate and --rate are not allowed without --plan")
    document = run_sweep(
        sweep,
        scheduler=args.scheduler,
        workers=args.workers,
        retry_failed=args.retry_failed,
        force=args.force,
        quiet=args.quiet,
        threads_per_point=threads,
    )
    points = document["points"]
    failed = [p for p in points if p["status"] == "failed"]
    finished = sum(1 for p in points if p["status"] == "finished")
    print(f"beadmd sweep: {finished} of {len(points)} points finished in {str(sweep.directory)!r}")
    for p in failed:
        print(f"  failed: {p['parameters']}: {p.get('message', '')}", file=sys.stderr)
    drifting = [p for p in points if p["status"] == "finished" and p.get("drifting")]
    for p in drifting:
        print(
            f"  not equilibrated: {p['parameters']}: <Rg^2> still drifts through the frames used (see its "
            "note); its mean is biased: run it longer (an [adaptive] target does)",
            file=sys.stderr,
        )
    if document.get("stopped_by"):
        stopped = sum(1 for p in points if p["status"] == "interrupted")
        print(
            f"beadmd sweep: stopped by {document['stopped_by']}: {stopped} running points stopped at a "
            f"checkpoint, {len(points) - finished - stopped - len(failed)} not started; run the same "
            "command again to continue (no report written)",
            file=sys.stderr,
        )
        return 130
    if not args.no_report:
        kinds = [sweep.study] if sweep.study else []
        if "system.beads_per_chain" in sweep.axes and "scaling" not in kinds:
            kinds.append("scaling")  # nu per condition, whatever the study
        studies, report = _study_and_report(sweep.directory, document, kinds, leave_out_failing=True)
        _print_study_values(studies)
        print(f"\nreport: {report}")
    return 3 if failed else 0


def _report(args: argparse.Namespace) -> int:
    """Write (again) the HTML report of a sweep directory."""
    from .studies.sweep import read_results

    document = read_results(args.sweep_dir)
    kinds = args.study or ([document["sweep"]["study"]] if document["sweep"].get("study") else [])
    studies, report = _study_and_report(args.sweep_dir, document, kinds)
    _print_study_values(studies)
    print(f"report: {report}")
    return 0


def _compare(args: argparse.Namespace) -> int:
    """Compare two runs or sweeps observable by observable; exit 1 on a significant difference."""
    from .studies import compare as comparing

    result = comparing.compare(args.a, args.b, threshold=args.threshold)
    print(comparing.to_json(result) if args.json else comparing.format_table(result))
    return comparing.exit_code(result)


def _options(args: argparse.Namespace) -> int:
    """Print the reference of every input-file key, generated from the schema."""
    from .io.config import options_reference

    print(options_reference(), end="")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="beadmd", description="Bead-spring polymer molecular dynamics on the CPU."
    )
    p.add_argument("--version", action="version", version=f"beadmd {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    ex = sub.add_parser("example", help="run a short good-solvent chain study and print what it measured")
    ex.add_argument("--lengths", default="8,16,32", help="comma-separated chain lengths N (default 8,16,32)")
    ex.add_argument("--replicas", type=int, default=32, help="independent chains per N (default 32)")
    ex.add_argument("--steps", type=int, default=20000, help="production steps per N (default 20000)")
    ex.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    ex.add_argument("--threads", type=int, default=None, help="Numba threads (default: all)")
    ex.set_defaults(func=_example)
    be = sub.add_parser("bench", help="time the step loop on the benchmark cases and print what it measured")
    be.add_argument(
        "--case",
        action="append",
        default=None,
        metavar="NAME",
        help="a case to run (repeatable): kg-melt, dilute-replicas, long-chain, poor-solvent, two-d, "
        "numpy-baseline (default: all)",
    )
    be.add_argument(
        "--threads", default=None, help="Numba threads, or a comma list such as 1,2 (default: all threads)"
    )
    be.add_argument("--steps", type=int, default=None, help="timed steps per case (default: about 3 s worth)")
    be.add_argument("--json", action="store_true", help="print the machine and the results as JSON")
    be.add_argument(
        "--scaling",
        action="store_true",
        help="time melts of 4 000 to 1 024 000 beads in fresh processes (time and memory against n)",
    )
    be.add_argument(
        "--scale", type=float, default=1.0, help="system sizes relative to the cases' (default 1)"
    )
    be.add_argument("--skin", type=float, default=0.4, help="Verlet-list skin in sigma (default 0.4)")
    be.add_argument("--repeats", type=int, default=1, help="timed blocks per case; the median is reported")
    be.set_defaults(func=_bench)
    ru = sub.add_parser(
        "run",
        help="carry out the run an input file describes (push-off, equilibration, production) or "
        "continue a stopped one",
        description="Carry out a run from a TOML input file into a new run directory (trajectory.h5, "
        "log.csv, metadata.json, checkpoint.h5, config.json, input.toml). Exit codes: 0 finished, "
        "2 bad input (nothing written), 3 the run failed (frames and checkpoint kept), 130 stopped "
        "by a signal (resume it). Every input key: beadmd options.",
    )
    ru.add_argument("input", nargs="?", default=None, metavar="INPUT.toml", help="the input file")
    ru.add_argument(
        "--resume", metavar="RUN_DIR", default=None, help="continue the run in RUN_DIR from its checkpoint"
    )
    ru.add_argument(
        "--output", metavar="DIR", default=None, help="run directory (default: output.directory of the input)"
    )
    ru.add_argument(
        "--overwrite", action="store_true", help="replace an existing run directory (run directories only)"
    )
    ru.add_argument("--threads", type=int, default=None, help="Numba threads (default: the input's threads)")
    ru.add_argument(
        "--progress",
        choices=("auto", "bar", "lines", "quiet"),
        default="auto",
        help="a bar on a terminal, plain lines otherwise (auto), or as chosen",
    )
    ru.add_argument("--quiet", action="store_true", help="print nothing unless something goes wrong")
    ru.set_defaults(func=_run)
    an = sub.add_parser(
        "analyze",
        help="chain size, shape, distributions and form factor with error bars: a table and figures",
        description="Analyse a run directory (production frames by default), or a topology and "
        "trajectory that MDAnalysis reads, into results.csv/results.json (every value with its "
        "error), curves.json and four PNG figures.",
    )
    an.add_argument("source", metavar="RUN_DIR|TOPOLOGY", help="a run directory, or a topology file")
    an.add_argument("trajectory", nargs="?", default=None, metavar="TRAJECTORY", help="trajectory file")
    an.add_argument("--output", default=None, help="output directory (default RUN_DIR/analysis)")
    an.add_argument("--overwrite", action="store_true", help="replace an existing output directory")
    an.add_argument("--all-frames", action="store_true", help="every frame, not only the production stage")
    an.add_argument("--start", type=int, default=None, help="first frame (index into the selected frames)")
    an.add_argument("--stop", type=int, default=None, help="stop before this frame")
    an.add_argument("--step", type=int, default=None, help="use every step-th frame")
    an.add_argument("--chains", default=None, help="chains to use: 'first:stop[:step]' or a comma list")
    an.add_argument(
        "--chains-from",
        choices=("residues", "fragments"),
        default="residues",
        help="MDAnalysis input: a chain is a residue (default) or a bonded fragment",
    )
    an.add_argument(
        "--independent-chains",
        action="store_true",
        help="MDAnalysis input: the chains never interact (replicas), so errors may use their spread",
    )
    an.add_argument("--q-min", type=float, default=None, help="smallest wave number of S(q)")
    an.add_argument("--q-max", type=float, default=None, help="largest wave number of S(q)")
    an.add_argument("--q-points", type=int, default=40, help="wave numbers between q-min and q-max")
    an.add_argument("--q-window", default=None, help="fractal window 'qmin:qmax' of the nu fit from S(q)")
    an.add_argument("--s-window", default=None, help="window 'smin:smax' of the nu fit from <R^2(s)>")
    an.add_argument("--bins", type=int, default=40, help="bins of the end-to-end histogram")
    an.add_argument("--no-figures", action="store_true", help="write the tables only")
    an.set_defaults(func=_analyze)
    sw = sub.add_parser(
        "sweep",
        help="many runs over parameter axes (local pool or Dask), their analyses, a study and a report",
        description="Carry out every point of a sweep file that is not finished yet (finished points are "
        "recognised by the hash of their configuration), analyse each, run the sweep's study and write "
        "SWEEP_DIR/report.html. Exit codes: 0 all points finished, 2 bad input (nothing started), "
        "3 some points failed (recorded with their messages; rerun with --retry-failed), 130 stopped by "
        "Ctrl-C or SIGTERM (running points keep a checkpoint; run the same command again to continue).",
    )
    sw.add_argument("sweep", metavar="SWEEP.toml", help="the sweep file")
    sw.add_argument("--output", default=None, help="sweep directory (default: output.directory of the file)")
    sw.add_argument("--scheduler", default=None, metavar="ADDRESS", help="a running Dask scheduler")
    sw.add_argument("--workers", type=int, default=None, help="local worker processes (default: all cores)")
    sw.add_argument("--retry-failed", action="store_true", help="run failed points again")
    sw.add_argument(
        "--force", action="store_true", help="add points to a sweep of another base configuration"
    )
    sw.add_argument(
        "--threads-per-point",
        type=int,
        default=None,
        metavar="N",
        help="Numba threads of each point's run (default: the file's threads_per_point, 1); the local "
        "pool then has cores // N workers; results do not depend on it",
    )
    sw.add_argument(
        "--plan",
        action="store_true",
        help="start nothing: print each point's status, bead-steps, rate and time left, and the "
        "wall time on the pool",
    )
    sw.add_argument(
        "--calibrate",
        type=int,
        default=0,
        metavar="STEPS",
        help="with --plan: time STEPS steps of each unfinished point on its threads (after as many "
        "warm-up steps) for its rate",
    )
    sw.add_argument(
        "--rate",
        type=float,
        default=None,
        metavar="BEAD_STEPS_PER_S",
        help="with --plan: the rate of one worker for unfinished points (default: measured on the "
        "finished points)",
    )
    sw.add_argument("--no-report", action="store_true", help="skip the study and the report")
    sw.add_argument("--quiet", action="store_true", help="no progress lines")
    sw.set_defaults(func=_sweep)
    rp = sub.add_parser("report", help="write the HTML report of a sweep directory (figures embedded)")
    rp.add_argument("sweep_dir", metavar="SWEEP_DIR")
    rp.add_argument(
        "--study",
        action="append",
        default=None,
        choices=("scaling", "theta", "crossover", "dimensions"),
        help="studies to include (repeatable; default the sweep's own)",
    )
    rp.set_defaults(func=_report)
    cp = sub.add_parser(
        "compare",
        help="regression comparison of two runs or sweeps: differences, errors, z-scores "
        "(exit 1 if significant)",
    )
    cp.add_argument("a", metavar="A", help="run directory, sweep directory or results file")
    cp.add_argument("b", metavar="B", help="run directory, sweep directory or results file")
    cp.add_argument("--threshold", type=float, default=3.0, help="|z| that counts as significant (default 3)")
    cp.add_argument("--json", action="store_true", help="print the comparison as JSON")
    cp.set_defaults(func=_compare)
    op = sub.add_parser(
        "options", help="print every input-file key with its type, default, range and meaning"
    )
    op.set_defaults(func=_options)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args))
    except BeadmdError as exc:
        print(f"beadmd: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
