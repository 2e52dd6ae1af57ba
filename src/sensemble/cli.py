"""The `sensemble` command: the only module that knows both stages.

Exit status: 0 every run fine, 1 some runs failed (listed on stderr and in the report), 2 bad usage or
configuration (one line on stderr, no traceback).

Every command that writes an output folder also writes there `effective-config.toml` (the settings it
actually used, command-line flags applied) and appends every message it prints, timestamped, to
`sensemble.log` — also with `--quiet`, which only keeps the terminal silent.
"""
from __future__ import annotations

import argparse
import dataclasses
import os
import shlex
import sys
import time
from pathlib import Path

from .console import LOG_NAME, Console, _CoarseProgress  # noqa: F401 — LOG_NAME is part of the command's interface

EXIT_OK, EXIT_RUNS_FAILED, EXIT_USAGE = 0, 1, 2
CONFIG_NAME = "effective-config.toml"


class UsageError(Exception):
    """Bad usage or configuration: exit status 2 with a one-line message."""


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr (exit status 2), pointing at --help."""

    def error(self, message):
        self.exit(EXIT_USAGE, f"{self.prog}: {message} (see {self.prog} --help)\n")


# ------------------------------------------------------------------------------------------ parser


def _grid(text: str) -> tuple[int, int]:
    try:
        nlat, nlon = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"grid {text!r}: expected NLATxNLON, e.g. 36x72") from None
    if nlat < 2 or nlon < 2:
        raise argparse.ArgumentTypeError(f"grid {text!r}: needs at least 2 latitudes and 2 longitudes")
    return nlat, nlon


def _whole_number(minimum: int):
    """An argparse type: a whole number of at least `minimum`."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"{text!r}: must be at least {minimum}")
        return value

    return parse


_positive = _whole_number(1)
_non_negative = _whole_number(0)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="sensemble", description="Climate sensitivity from model ensembles, "
                     "and emulated warming pathways for sensitivities no model has.",
                     epilog="Exit status: 0 all runs fine, 1 some runs failed (listed), 2 bad usage or config.")
    parser.add_argument("--version", action="version", version=f"sensemble {_version()}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("demo", help="build the demo archive, extract, emulate, write everything")
    p.add_argument("--out", default="demo-output", help="output folder (default: demo-output)")
    p.add_argument("--models", type=_positive, default=8, help="number of invented models (default 8)")
    p.add_argument("--seed", type=_non_negative, default=0)
    p.add_argument("--grid", type=_grid, default=None, help="NLATxNLON of the demo archive")
    p.add_argument("--workers", type=_positive, help="dask workers (default: the machine's cores)")
    p.add_argument("--force", action="store_true", help="rebuild the archive and recompute everything")
    p.add_argument("--quiet", action="store_true", help="no progress on the terminal (the log file is still written)")

    p = sub.add_parser("demo-archive", help="write a synthetic archive of invented models")
    p.add_argument("dir")
    p.add_argument("--models", type=_positive, default=8)
    p.add_argument("--seed", type=_non_negative, default=0)
    p.add_argument("--grid", type=_grid, default=None, help="NLATxNLON, e.g. 180x360 for benchmarks")
    p.add_argument("--years", default="", metavar="ROLE=N[,ROLE=N]",
                   help="run lengths in years by role (control, abrupt, onepct, historical, scenario), "
                        "e.g. control=60,abrupt=40 for a quick archive")
    p.add_argument("--mixed", action="store_true",
                   help="write every second model the CMIP5 way (its directories, names, ids and attributes)")
    p.add_argument("--quiet", action="store_true")

    p = sub.add_parser("extract", help="archive → sensitivity table, series, report, figures")
    p.add_argument("archive")
    p.add_argument("--out", required=True)
    p.add_argument("--config", help="TOML config; flags given here override it")
    p.add_argument("--workers", type=_positive, help="dask workers (default: the config's, else the machine's cores)")
    p.add_argument("--force", action="store_true", help="recompute runs whose cached results are up to date")
    p.add_argument("--quiet", action="store_true", help="no progress on the terminal (the log file is still written)")

    p = sub.add_parser("emulate", help="sensitivity table + series → emulator → pathways")
    p.add_argument("--from", dest="source", required=True, help="an extraction's output folder")
    p.add_argument("--out", required=True)
    p.add_argument("--config", help="TOML config; flags given here override it")
    p.add_argument("--scenario", help="experiment id of the target scenario")
    p.add_argument("--at", action="append", default=[], metavar="NAME=VALUE[,NAME=VALUE]",
                   help="predict at these inputs, e.g. ecs_eff=3.7 (repeatable: one case each)")
    p.add_argument("--distribution", action="append", default=[], metavar="NAME=MEDIAN:LOW-HIGH|FILE.csv",
                   help="lognormal input through a median and a likely (17–83 %%) range, e.g. ecs_eff=3.0:2.5-4.0, "
                        "or a CSV file of input samples (repeatable)")
    p.add_argument("--pathway", action="append", default=[], metavar="EXP|forcing_file=F|co2_file=F[,route=R,name=N]",
                   help="a scenario to emulate, repeatable: an experiment of the archive, a forcing file (W m-2 by "
                        "year) or a CO2 file (ppm by year); route auto, gp or parameters. Several make one batch")
    p.add_argument("--quiet", action="store_true", help="no progress on the terminal (the log file is still written)")

    p = sub.add_parser("run", help="a whole batch as a TOML config says: extraction, then emulation")
    p.add_argument("config")
    p.add_argument("--out", help="override the config's output folder")
    p.add_argument("--workers", type=_positive, help="override the config's [compute] workers")
    p.add_argument("--force", action="store_true", help="recompute runs whose cached results are up to date")
    p.add_argument("--quiet", action="store_true", help="no progress on the terminal (the log file is still written)")
    return parser


def _version() -> str:
    from sensemble import __version__

    return __version__


# ------------------------------------------------------------------------------------------ stages


def _run_extract(archive, out, config, console: Console, batch_dir=None):
    """Extraction under the configured compute back-end; per-run table and failures reported.

    `batch_dir` (default `out`) is the batch's output folder: its name names the cluster's worker jobs,
    and their logs go under it."""
    from sensemble.extractor import pipeline

    from .compute import open_compute

    quiet = config.output.quiet
    bar = not quiet and sys.stdout.isatty()  # a redrawn bar only where it can be redrawn
    coarse = _CoarseProgress(console, terminal=not quiet and not bar)
    batch_dir = Path(batch_dir or out).resolve()
    with open_compute(config.compute, batch=batch_dir.name, out_dir=batch_dir), coarse.callback:
        result = pipeline.extract(archive, out, config.extraction, force=config.output.force, progress=bar,
                                   figures=config.output.figures, log=console)
    console(f"extraction: {len(result.rows)} rows ({len(result.cached)} reused from {Path(out) / 'series'}), "
            f"{len(result.failures)} failed, {result.seconds:.1f} s → {Path(out) / 'sensitivity.csv'}")
    _print_table(result.rows, console)
    for failure in result.failures:
        who = " ".join(part for part in (failure.model, failure.member, failure.what) if part)
        named = bool(failure.model) and failure.message.startswith(f"model {failure.model}")
        console.error(f"FAILED {failure.message if named else f'{who}: {failure.message}'}")
    if result.failures:
        console.error(f"{len(result.failures)} run(s) failed; the others are complete — details in "
                      f"{Path(out) / 'report.md'}")
    return result


def _print_table(rows, say):
    if not rows:
        return
    say(f"{'model':<16}{'member':<11}{'ERF4x':>7}{'λ':>7}{'ECS':>6}{'5–95 %':>13}{'TCR':>6}  flags")
    for r in rows:
        f = lambda k, d=2: "" if r.get(k) is None else f"{r[k]:.{d}f}"  # noqa: E731
        interval = f"{f('ecs_eff_q05')}–{f('ecs_eff_q95')}" if r.get("ecs_eff_q05") is not None else ""
        say(f"{r['model']:<16}{r['member']:<11}{f('erf_4x'):>7}{f('feedback'):>7}{f('ecs_eff'):>6}"
            f"{interval:>13}{f('tcr'):>6}  {r.get('flags') or ''}")


def _run_emulate(source, out, config, console: Console):
    from sensemble.emulator import emulate, format_summary

    prediction = config.prediction
    if not config.output.figures:
        prediction = dataclasses.replace(prediction, figures=False)
    if config.emulator.pathways:  # several scenarios: the archive's, forcing files, CO2 files
        from sensemble.emulator.scenario_batch import emulate_pathways, format_pathways_summary

        summary = emulate_pathways(source, out, config.emulator, prediction, progress=console)
        console(format_pathways_summary(summary))
        return summary
    result = emulate(source, out, config.emulator, prediction, progress=console)
    console(format_summary(result.summary))
    return result


def _extract_then_emulate(archive, out: Path, config, console: Console, emulate_step: str):
    """Extract into OUT/extract, then emulate into OUT/emulate; None when no model could be extracted."""
    result = _run_extract(archive, out / "extract", config, console, batch_dir=out)
    _write_effective_config(config, out, console)
    if not result.rows:
        console.error("no model could be extracted, so nothing to emulate")
        return None
    console(f"{emulate_step} emulating warming pathways")
    _run_emulate(out / "extract", out / "emulate", config, console)
    return result


def _header(args) -> str:
    return f"sensemble {_version()} (pid {os.getpid()}): sensemble {' '.join(map(shlex.quote, args.argv))}"


def _write_effective_config(config, out: Path, console: Console) -> None:
    from .config import save_config

    path = save_config(config, out / CONFIG_NAME)
    console.info(f"effective configuration written to {path}", terminal=False)


# ------------------------------------------------------------------------------------------ commands


def cmd_demo_archive(args, console: Console) -> int:
    from sensemble import demo as demo_ensemble
    from sensemble.demo.generate import _parse_years

    kwargs = {"n_models": args.models, "seed": args.seed, "mixed": args.mixed}
    if args.grid:
        kwargs["grid"] = args.grid
    try:
        if args.years:
            kwargs["years"] = _parse_years(args.years)
        t0 = time.perf_counter()
        root = demo_ensemble.generate(Path(args.dir), progress=not args.quiet, **kwargs)
    except (ValueError, FileExistsError) as err:  # bad run lengths, or a folder that is not a demo archive
        raise UsageError(str(err)) from None
    console(f"demo archive written to {Path(root) / 'archive'} in {time.perf_counter() - t0:.1f} s "
            f"(truth in {Path(root) / 'truth.csv'})")
    return EXIT_OK


def cmd_demo(args, console: Console) -> int:
    from sensemble import demo as demo_ensemble

    from .config import load_config, merge_overrides, shipped_config

    out = Path(args.out)
    config = load_config(shipped_config("demo"), check_paths=False)
    # Files the generator writes beside the archive: each scenario's true forcing (for a model with F2x =
    # 3.71 W m-2), which validates the parameter route with no scenario run at all, and the invented user pathway.
    pathways = tuple({**spec, "forcing_file": str(out.resolve() / f"forcing_{spec['experiment']}.csv"),
                      "forcing_f2x": demo_ensemble.REFERENCE_F2X}
                     if spec.get("experiment") in demo_ensemble.SCENARIOS and not spec.get("forcing_file") else spec
                     for spec in config.emulator.pathways)
    pathways += ({"name": "user-overshoot", "forcing_file": str(out.resolve() / "user_forcing.csv"),
                  "forcing_f2x": demo_ensemble.REFERENCE_F2X},)
    config = merge_overrides(config, archive=str(out / "archive"), out=str(out), workers=args.workers,
                             force=args.force or None, quiet=args.quiet or None, pathways=pathways,
                             check_paths=False)
    console.open_log(out, _header(args))
    kwargs = {"n_models": args.models, "seed": args.seed}
    if args.grid:
        kwargs["grid"] = args.grid
    archive = out / "archive"
    t0 = time.perf_counter()
    if args.force or not (out / "truth.csv").exists():
        console(f"1/3 writing the demo archive of {args.models} invented models to {archive}")
        demo_ensemble.generate(out, progress=not args.quiet, **kwargs)
    else:
        console(f"1/3 reusing the demo archive in {archive} (--force to rebuild)")
    console("2/3 extracting sensitivities")
    result = _extract_then_emulate(archive, out, config, console, emulate_step="3/3")
    if result is None:
        return EXIT_RUNS_FAILED
    console(f"done in {time.perf_counter() - t0:.0f} s; outputs in {out}/ (report: {out / 'extract' / 'report.md'}, "
            f"log: {console.log_path})")
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def cmd_extract(args, console: Console) -> int:
    from .config import load_config, merge_overrides

    archive = Path(args.archive)
    if not (archive.is_dir() or (archive.is_file() and archive.suffix == ".json")):
        what = "is not a folder or a catalogue (.json)" if archive.exists() else "no such folder"
        raise UsageError(f"archive {args.archive}: {what} — give the folder that holds the model directories "
                         "(NetCDF files or Zarr stores) or an ESM catalogue's .json file")
    config = load_config(args.config, check_paths=False) if args.config else _default_config()
    config = merge_overrides(config, archive=args.archive, out=args.out, workers=args.workers,
                             force=args.force or None, quiet=args.quiet or None)
    console.quiet = config.output.quiet
    out = Path(config.output.dir)
    console.open_log(out, _header(args))
    result = _run_extract(config.archive.root, out, config, console)
    _write_effective_config(config, out, console)
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def _cases(args) -> list[dict]:
    """One config-style case per --at (NAME=VALUE[,NAME=VALUE…]) and per --distribution."""
    from sensemble.emulator import parse_distribution, parse_point

    cases = []
    for text in args.at:
        case = parse_point(text)
        if not case:
            raise UsageError(f"--at {text!r}: give NAME=VALUE, e.g. ecs_eff=3.7")
        cases.append({"name": ",".join(f"{k}={v:g}" for k, v in case.items()), **case})
    for text in args.distribution:
        spec = parse_distribution(text)
        if "samples_file" in spec:
            path = Path(spec["samples_file"])
            if not path.is_file():
                raise UsageError(f"--distribution {text}: no such file — give a CSV file with one column per input")
            cases.append({"name": f"samples:{path.stem}", "samples_file": str(path.resolve())})
        else:
            # the config's form of a distribution case: <input> = {distribution, median, likely}
            cases.append({"name": spec["name"], spec["input"]: {"distribution": spec["distribution"],
                                                                 "median": spec["median"], "likely": spec["likely"]}})
    return cases


def _pathway(text: str) -> dict:
    """--pathway text → a pathway table: 'demo-rise', 'forcing_file=plan.csv,name=plan', 'co2_file=c.csv'."""
    if "=" not in text:
        return {"experiment": text.strip()}
    spec = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        key, sep, value = part.partition("=")
        if not sep or not value:
            raise UsageError(f"--pathway {text!r}: give EXP or KEY=VALUE[,KEY=VALUE], e.g. forcing_file=plan.csv")
        key = key.strip()
        spec[key] = str(Path(value).resolve()) if key.endswith("_file") else value.strip()
        if key == "forcing_f2x":
            try:
                spec[key] = float(value)
            except ValueError:
                raise UsageError(f"--pathway {text!r}: forcing_f2x must be a number (W m-2)") from None
    return spec


def cmd_emulate(args, console: Console) -> int:
    from .config import load_config, merge_overrides

    source = Path(args.source)
    if not (source / "sensitivity.csv").is_file():
        what = "no such folder" if not source.exists() else "no sensitivity.csv there"
        raise UsageError(f"--from {args.source}: {what} — give the output folder of `sensemble extract`")
    config = load_config(args.config, check_paths=False) if args.config else _default_config()
    overrides = {"out": args.out, "scenario": args.scenario, "quiet": args.quiet or None}
    if args.pathway:
        overrides["pathways"] = tuple(_pathway(text) for text in args.pathway)
    cases = _cases(args)
    if cases:
        overrides["cases"] = cases
    config = merge_overrides(config, check_paths=False, **overrides)
    console.quiet = config.output.quiet
    out = Path(config.output.dir)
    console.open_log(out, _header(args))
    _run_emulate(source, out, config, console)
    _write_effective_config(config, out, console)
    return EXIT_OK


def cmd_run(args, console: Console) -> int:
    from .config import load_config, merge_overrides

    config = load_config(args.config)
    config = merge_overrides(config, out=args.out, workers=args.workers, force=args.force or None,
                             quiet=args.quiet or None)
    if config.archive.root is None:
        raise UsageError(f"{args.config}: [archive] root is not set — give the archive folder there")
    if config.output.dir is None:
        raise UsageError(f"{args.config}: [output] dir is not set — give it there or with --out")
    console.quiet = config.output.quiet
    out = Path(config.output.dir)
    console.open_log(out, _header(args))
    t0 = time.perf_counter()
    console(f"1/2 extracting sensitivities from {config.archive.root}")
    result = _extract_then_emulate(config.archive.root, out, config, console, emulate_step="2/2")
    if result is None:
        return EXIT_RUNS_FAILED
    console(f"done in {time.perf_counter() - t0:.0f} s; outputs in {out}/ (log: {console.log_path})")
    return EXIT_RUNS_FAILED if result.failures else EXIT_OK


def _default_config():
    from .config import config_from_dict

    return config_from_dict({}, source="<defaults>", check_paths=False)


COMMANDS = {"demo": cmd_demo, "demo-archive": cmd_demo_archive, "extract": cmd_extract, "emulate": cmd_emulate,
            "run": cmd_run}


def _usage_errors() -> tuple[type[BaseException], ...]:
    """Errors that mean "change the command or the config": exit status 2, one line."""
    from sensemble.emulator import EmulatorInputError
    from sensemble.extractor.errors import OutputInUseError

    from .compute import ComputeError
    from .config import ConfigError

    return UsageError, ConfigError, EmulatorInputError, ComputeError, OutputInUseError


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        args = build_parser().parse_args(argv)
    except SystemExit as done:  # --help, --version (0) or a usage mistake (2, already said on stderr)
        return done.code if isinstance(done.code, int) else EXIT_USAGE
    args.argv = argv
    console = Console(quiet=getattr(args, "quiet", False))
    try:
        return COMMANDS[args.command](args, console)
    except KeyboardInterrupt:
        console.error(f"sensemble {args.command}: interrupted; rerun the same command to resume")
        return 130
    except Exception as err:  # noqa: BLE001 — every error leaves as one line; the traceback goes to the log
        text = " ".join(str(err).split()) or type(err).__name__
        if isinstance(err, _usage_errors()):
            console.error(f"sensemble {args.command}: {text}")
            return EXIT_USAGE
        where = f"the traceback is in {console.log_path}" if console.log_path else "rerun with an output folder to log it"
        console.exception(f"sensemble {args.command}: unexpected error ({type(err).__name__}: {text}); {where} — "
                          "please report it")
        return EXIT_RUNS_FAILED
    finally:
        console.close()


if __name__ == "__main__":
    sys.exit(main())
