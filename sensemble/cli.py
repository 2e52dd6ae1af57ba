"""The `sensemble` command: the only module that knows both stages.

Exit status: 0 every run fine, 1 some runs failed (listed in the report), 2 bad usage or configuration.
"""
from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

EXIT_OK, EXIT_RUNS_FAILED, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """Bad usage or configuration: exit status 2 with a one-line message."""


def _grid(text: str) -> tuple[int, int]:
    try:
        nlat, nlon = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"grid {text!r}: expected NLATxNLON, e.g. 36x72") from None
    if nlat < 2 or nlon < 2:
        raise argparse.ArgumentTypeError(f"grid {text!r}: needs at least 2 latitudes and 2 longitudes")
    return nlat, nlon


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="sensemble", description="Climate sensitivity from model ensembles, "
                                     "and emulated warming pathways for sensitivities no model has.")
    parser.add_argument("--version", action="version", version=f"sensemble {_version()}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("demo", help="build the demo archive, extract, emulate, write everything")
    p.add_argument("--out", default="demo-output", help="output folder (default: demo-output)")
    p.add_argument("--models", type=int, default=8, help="number of invented models (default 8)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--grid", type=_grid, default=None, help="NLATxNLON of the demo archive")
    p.add_argument("--force", action="store_true", help="recompute everything")
    p.add_argument("--quiet", action="store_true")

    p = sub.add_parser("demo-archive", help="write a synthetic archive of invented models")
    p.add_argument("dir")
    p.add_argument("--models", type=int, default=8)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--grid", type=_grid, default=None, help="NLATxNLON, e.g. 180x360 for benchmarks")

    p = sub.add_parser("extract", help="archive → sensitivity table, series, report, figures")
    p.add_argument("archive")
    p.add_argument("--out", required=True)
    p.add_argument("--config", help="TOML config; flags given here override it")
    p.add_argument("--workers", type=int, help="dask workers (default: the config's, else the machine's cores)")
    p.add_argument("--force", action="store_true", help="recompute runs whose cached results are up to date")
    p.add_argument("--quiet", action="store_true")

    p = sub.add_parser("emulate", help="sensitivity table + series → emulator → pathways")
    p.add_argument("--from", dest="source", required=True, help="an extraction's output folder")
    p.add_argument("--out", required=True)
    p.add_argument("--config")
    p.add_argument("--scenario", help="experiment id of the target scenario")
    p.add_argument("--at", action="append", default=[], metavar="NAME=VALUE[,NAME=VALUE]",
                   help="predict at these inputs, e.g. ecs_eff=3.7 (repeatable: one case each)")
    p.add_argument("--distribution", action="append", default=[], metavar="NAME=MEDIAN:LOW-HIGH|FILE.csv",
                   help="lognormal input through a median and a likely (17–83 %%) range, e.g. ecs_eff=3.0:2.5-4.0, "
                        "or a CSV file of input samples (repeatable)")
    p.add_argument("--quiet", action="store_true")

    p = sub.add_parser("run", help="a whole batch as a TOML config says")
    p.add_argument("config")
    p.add_argument("--out", help="override the config's output folder")
    p.add_argument("--workers", type=int)
    p.add_argument("--force", action="store_true")
    p.add_argument("--quiet", action="store_true")
    return parser


def _version() -> str:
    from extractor import __version__

    return __version__


def _say(quiet: bool):
    def say(message: str) -> None:
        if not quiet:
            print(message, flush=True)

    return say


def cmd_demo_archive(args) -> int:
    import demo_ensemble

    kwargs = {"n_models": args.models, "seed": args.seed}
    if args.grid:
        kwargs["grid"] = args.grid
    t0 = time.perf_counter()
    root = demo_ensemble.generate(Path(args.dir), progress=True, **kwargs)
    print(f"demo archive written to {Path(root) / 'archive'} in {time.perf_counter() - t0:.1f} s "
          f"(truth in {Path(root) / 'truth.csv'})")
    return EXIT_OK


def _run_extract(archive, out, settings, compute, force, quiet, say):
    import extractor

    from .compute import open_compute

    with open_compute(compute):
        result = extractor.extract(archive, out, settings, force=force, progress=not quiet, log=say)
    say(f"extraction: {len(result.rows)} rows ({len(result.cached)} reused), {len(result.failures)} failed, "
        f"{result.seconds:.1f} s → {Path(out) / 'sensitivity.csv'}")
    for f in result.failures:
        say(f"  FAILED {f.model} {f.member} {f.what}: {f.message}")
    return result


def _print_table(rows, say):
    say(f"{'model':<16}{'member':<11}{'ERF4x':>7}{'λ':>7}{'ECS':>6}{'5–95 %':>13}{'TCR':>6}  flags")
    for r in rows:
        f = lambda k, d=2: "" if r.get(k) is None else f"{r[k]:.{d}f}"  # noqa: E731
        interval = f"{f('ecs_eff_q05')}–{f('ecs_eff_q95')}" if r.get("ecs_eff_q05") is not None else ""
        say(f"{r['model']:<16}{r['member']:<11}{f('erf_4x'):>7}{f('feedback'):>7}{f('ecs_eff'):>6}"
            f"{interval:>13}{f('tcr'):>6}  {r.get('flags') or ''}")


def _run_emulate(source, out, emulator_settings, prediction, say):
    from emulator import emulate, format_summary

    result = emulate(source, out, emulator_settings, prediction, progress=say)
    say(format_summary(result.summary))
    return result


def cmd_demo(args) -> int:
    import demo_ensemble

    from .config import load_config, merge_overrides, shipped_config

    say = _say(args.quiet)
    out = Path(args.out)
    config = load_config(shipped_config("demo"), check_paths=False)
    config = merge_overrides(config, archive=str(out / "archive"), out=str(out), check_paths=False)
    kwargs = {"n_models": args.models, "seed": args.seed}
    if args.grid:
        kwargs["grid"] = args.grid
    archive = out / "archive"
    t0 = time.perf_counter()
    if args.force or not (out / "truth.csv").exists():
        say(f"1/3 writing the demo archive of {args.models} invented models to {archive}")
        demo_ensemble.generate(out, progress=not args.quiet, **kwargs)
    else:
        say(f"1/3 reusing the demo archive in {archive} (--force to rebuild)")
    say("2/3 extracting sensitivities")
    result = _run_extract(archive, out / "extract", config.extraction, config.compute, args.force, args.quiet, say)
    _print_table(result.rows, say)
    say("3/3 emulating warming pathways")
    _run_emulate(out / "extract", out / "emulate", config.emulator, config.prediction, say)
    say(f"done in {time.perf_counter() - t0:.0f} s; outputs in {out}/ (report: {out / 'extract' / 'report.md'})")
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def cmd_extract(args) -> int:
    from .config import load_config, merge_overrides

    if not Path(args.archive).is_dir():
        raise UsageError(f"archive {args.archive}: no such folder — give the folder that holds the model directories")
    config = load_config(args.config, check_paths=False) if args.config else _default_config()
    config = merge_overrides(config, archive=args.archive, out=args.out, workers=args.workers,
                             force=args.force or None, quiet=args.quiet or None)
    say = _say(config.output.quiet)
    result = _run_extract(args.archive, args.out, config.extraction, config.compute, config.output.force,
                          config.output.quiet, say)
    _write_effective_config(config, Path(args.out))
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def _cases(args) -> tuple[dict, ...]:
    """One case per --at (NAME=VALUE[,NAME=VALUE…]) and per --distribution."""
    from emulator import parse_distribution, parse_point

    cases = []
    for text in args.at:
        case = parse_point(text)
        cases.append({"name": ",".join(f"{k}={v:g}" for k, v in case.items()), **case})
    cases += [parse_distribution(text) for text in args.distribution]
    return tuple(cases)


def cmd_emulate(args) -> int:
    from .config import load_config

    config = load_config(args.config, check_paths=False) if args.config else _default_config()
    if not (Path(args.source) / "sensitivity.csv").exists():
        raise UsageError(f"--from {args.source}: no sensitivity.csv there — give the output folder of `sensemble extract`")
    emulator_settings = config.emulator
    if args.scenario:
        emulator_settings = dataclasses.replace(emulator_settings, scenario=args.scenario)
    prediction = config.prediction
    cases = _cases(args)
    if cases:
        prediction = dataclasses.replace(prediction, cases=cases)
    _run_emulate(args.source, args.out, emulator_settings, prediction, _say(args.quiet))
    _write_effective_config(config, Path(args.out))
    return EXIT_OK


def cmd_run(args) -> int:
    from .config import load_config, merge_overrides

    config = load_config(args.config)
    config = merge_overrides(config, out=args.out, workers=args.workers, force=args.force or None,
                             quiet=args.quiet or None)
    out = Path(config.output.dir)
    quiet = config.output.quiet
    say = _say(quiet)
    result = _run_extract(config.archive.root, out / "extract", config.extraction, config.compute,
                          config.output.force, quiet, say)
    _write_effective_config(config, out)
    if result.rows:
        _run_emulate(out / "extract", out / "emulate", config.emulator, config.prediction, say)
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def _default_config():
    from .config import config_from_dict

    return config_from_dict({}, source="<defaults>", check_paths=False)


def _write_effective_config(config, out: Path) -> None:
    from .config import save_config

    save_config(config, out / "effective-config.toml")


COMMANDS = {"demo": cmd_demo, "demo-archive": cmd_demo_archive, "extract": cmd_extract, "emulate": cmd_emulate,
            "run": cmd_run}


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except UsageError as err:
        print(f"sensemble {args.command}: {err}", file=sys.stderr)
        return EXIT_USAGE
    except Exception as err:  # noqa: BLE001
        from emulator import EmulatorInputError

        from .compute import ComputeError
        from .config import ConfigError

        if isinstance(err, (ConfigError, EmulatorInputError, ComputeError)):
            print(f"sensemble {args.command}: {err}", file=sys.stderr)
            return EXIT_USAGE
        raise


if __name__ == "__main__":
    sys.exit(main())
