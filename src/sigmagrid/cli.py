"""The ``sigmagrid`` command.

    sigmagrid init FILE                 write a commented starter config
    sigmagrid check CONFIG              every problem of a config at once, or a summary of its grid
    sigmagrid cases CONFIG              list the cases a config expands to, before running
    sigmagrid run CONFIG [--results D]  run the whole grid in this process (no Snakemake)
    sigmagrid case --mechanism ...      run one case to one file
    sigmagrid show FILE.nc              readable summary of a case file
    sigmagrid batch CONFIG --index K    run batch K of a grid (what the workflow calls)
    sigmagrid summarize FILES... --summary S --table T
    sigmagrid plot FILE.nc [--out-dir D] per-case figures (more in cli_plot.py)

Exit status: 0 done (every case relaxed or not-relaxed: both are results); 2 bad input (one line
naming the field, no output file); 3 ``run`` or ``case`` finished but one or more cases failed
(their reasons are in cases.csv or the case file; ``batch`` exits 0 there, so that the workflow
records the failed case and goes on); 74 a results folder or output file
refused a write (full disk, read-only, gone: one line, finished files kept); 130 interrupted.
"""

from __future__ import annotations

import argparse
import errno
import json
import os
import re
import sys
from pathlib import Path

from .errors import TABLE_ROWS, FormatError, InputError, StorageError, positive_int as _positive_int
from .messages import QUIET, NORMAL, VERBOSE, detail, say, set_level

EXIT_INPUT = 2
EXIT_CASES_FAILED = 3
EXIT_STORAGE = 74  # EX_IOERR of sysexits.h

# One BLAS thread per process, unless the user asks otherwise: the matrices here are small (53 x
# 53, 53 x 325) and grid runs already use every core with processes. With the other core busy,
# multi-threaded OpenBLAS took 16-46 ms for the near-equilibrium spectra of one metric against 1 ms
# single-threaded, and 7 ms against 1 ms for a point of the Arrhenius fit's scan (gri30 bench
# case, 2026-12-03). Snakemake sets the same variables for its jobs; they only take effect before
# numpy is imported, which the command does lazily.
for _variable in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")


def _load_config(path: str, convert_into: str | Path | None = None) -> dict:
    """The validated config of ``path``; a mechanism in the keyword text format is converted to
    YAML into ``convert_into`` (default: a temporary folder of this process)."""
    config = _read_config(path)
    if Path(config["mechanism"]).suffix.lower() in (".yaml", ".yml") and not (
            config.get("thermo") or config.get("transport")):
        return config  # YAML: nothing to convert (and no Cantera import for the quick commands)
    from . import mechanism

    if convert_into is None:
        import atexit
        import shutil
        import tempfile

        convert_into = tempfile.mkdtemp(prefix="sigmagrid-mechanism-")
        atexit.register(shutil.rmtree, convert_into, ignore_errors=True)
    return mechanism.convert_keyword_format(config, convert_into, report=_note)


def _note(line: str) -> None:
    say(f"note: {line}")


def _read_config(path: str) -> dict:
    from . import config as config_mod

    if path.endswith(".json"):
        try:
            raw = json.loads(config_mod.read_config_text(path))
        except (json.JSONDecodeError, RecursionError) as err:
            raise InputError("config file", f"'{path}' is not valid JSON: {err}") from None
        return config_mod.validate(raw)
    return config_mod.load(path)


def cmd_cases(args) -> int:
    from . import grid as grid_mod, mechanism

    config = _load_config(args.config)
    grid = grid_mod.expand(config)
    batches = grid.batches(config["batch"]["cases_per_job"])
    for note in mechanism.describe(grid.gas).notes:
        say(f"note: {note}")
    if args.json:
        rows = [{"case_id": c.case_id, "label": c.label, "reactor": c.reactor, "mixture": c.composition_name,
                 "equivalence_ratio": c.equivalence_ratio, "initial_temperature_K": c.temperature,
                 "initial_pressure_Pa": c.pressure, "batch": i}
                for i, batch in enumerate(batches) for c in batch]
        print(json.dumps(sorted(rows, key=lambda r: r["label"]), indent=1, default=float))
        return 0
    print(f"# {len(grid.cases)} cases in {len(batches)} batches of up to {config['batch']['cases_per_job']}; "
          f"mechanism {grid.mechanism_path.name} (sha256 {grid.mechanism_sha256[:12]})")
    print(f"{'case_id':16}  {'reactor':17}  {'mixture':10}  {'phi [1]':>8}  {'T0 [K]':>8}  {'P0 [Pa]':>10}  label")
    for c in sorted(grid.cases, key=lambda c: c.label):
        print(f"{c.case_id:16}  {c.reactor:17}  {c.composition_name:10}  {c.equivalence_ratio:8.3g}  "
              f"{c.temperature:8.1f}  {c.pressure:10.4g}  {c.label}")
    return 0


def cmd_init(args) -> int:
    from importlib.resources import files

    target = Path(args.file)
    if target.exists():
        raise InputError("FILE", f"'{target}' exists; init never overwrites a file, name a new one")
    if target.suffix not in (".yaml", ".yml"):
        raise InputError("FILE", f"must end in .yaml or .yml, got '{target.name}'")
    text = files("sigmagrid").joinpath("templates/starter.yaml").read_text(encoding="utf-8")
    try:
        target.write_text(text, encoding="utf-8")
    except OSError as err:
        raise InputError("FILE", f"cannot write '{target}': {err.strerror}") from None
    say(f"wrote {target}; next: sigmagrid check {target}")
    return 0


def cmd_check(args) -> int:
    from . import config as config_mod, grid as grid_mod, runner

    text = config_mod.read_config_text(args.config)
    try:
        raw = json.loads(text) if args.config.endswith(".json") else config_mod.read_yaml(text, f"'{args.config}'")
    except (json.JSONDecodeError, RecursionError) as err:
        raise InputError("config file", f"'{args.config}' is not valid JSON: {err}") from None
    found = config_mod.problems(raw)
    for field, message in found:
        print(f"sigmagrid: error: {field}: {message}", file=sys.stderr)
    if found:
        print(f"{args.config}: {len(found)} problem{'s' if len(found) > 1 else ''}", file=sys.stderr)
        return EXIT_INPUT
    config = _load_config(args.config)  # a keyword-format mechanism is converted, its messages shown
    grid = grid_mod.expand(config)  # the mechanism, species and phase: an InputError names the field
    batches = grid.batches(config["batch"]["cases_per_job"])
    sea = runner.RunSettings.from_config(config).sea  # SEA settings are checked here too
    axes = {"reactors": len(config["reactors"]), "temperatures": len(config["temperature"]),
            "pressures": len(config["pressure"]), "mixtures": len({c.composition_name for c in grid.cases})}
    print(f"{args.config}: valid")
    print(f"  study       {config.get('study', '')}")
    print(f"  mechanism   {grid.mechanism_path.name}: {grid.gas.n_species} species, {grid.gas.n_reactions} reactions "
          f"(sha256 {grid.mechanism_sha256[:12]})")
    print(f"  grid        {len(grid.cases)} cases = " + " x ".join(f"{v} {k}" for k, v in axes.items()) +
          f", in {len(batches)} batches of up to {config['batch']['cases_per_job']}")
    print(f"  SEA metrics {', '.join(sea.metrics) if sea is not None else 'off'}")
    print(f"  next        sigmagrid estimate {args.config}   (time and disk, from a few sample cases)")
    return 0


def cmd_run(args) -> int:
    from . import runner

    config = _load_config(args.config, Path(args.results) / "mechanisms")
    summary = runner.run_grid(config, args.results, report=say, detail=detail)
    counts = {s: int((summary["status"] == s).sum()) for s in ("relaxed", "not-relaxed", "failed")}
    print(f"summary: {args.results}/summary.nc, {args.results}/cases.csv; " +
          ", ".join(f"{v} {k}" for k, v in counts.items()))
    return EXIT_CASES_FAILED if counts["failed"] else 0


def cmd_batch(args) -> int:
    from . import grid as grid_mod, runner

    config = _load_config(args.config)
    grid = grid_mod.expand(config)
    batches = grid.batches(config["batch"]["cases_per_job"])
    if not 0 <= args.index < len(batches):
        raise InputError("--index", f"must be between 0 and {len(batches) - 1}, got {args.index}")
    runner.run_cases(config, list(batches[args.index]), args.out_dir, report=say, detail=detail,
                     grid=grid)
    return 0


def cmd_summarize(args) -> int:
    from . import runner

    try:
        runner.write_summary(args.files, args.summary, args.table, args.workers)
    except OSError as err:
        raise runner.storage_error(Path(args.summary).parent, err, "the summary", "the case files are untouched") \
            from None
    print(f"wrote {args.summary} and {args.table} from {len(args.files)} case files")
    return 0


_CASE_FIELDS = {"mechanism": "--mechanism", "thermo": "--thermo", "phase": "--phase", "reactors[0]": "--reactor", "temperature[0]": "--temperature",
                "pressure[0]": "--pressure", "compositions[0].composition": "--composition",
                "feed.fuel": "--fuel", "feed.oxidizer": "--oxidizer", "feed.equivalence_ratio[0]": "--phi",
                "stop.max_time": "--max-time", "sea.metrics": "--sea-metrics",
                "stop.isothermal_max_time": "--max-time", "storage.max_samples": "--max-samples"}

#: grid axes that ``case --config`` replaces with the one case given on the command line
_GRID_AXES = ("reactors", "temperature", "pressure", "feed", "compositions")


def _case_config(args) -> dict:
    """The raw config of ``sigmagrid case``: a grid config's settings (``--config``) with the case's
    own axes, and the command line's settings over both."""
    from . import config as config_mod

    raw = {}
    if args.config is not None:
        base = config_mod.read_yaml(config_mod.read_config_text(args.config), f"'{args.config}'")
        if not isinstance(base, dict):
            raise InputError("--config", f"'{args.config}' is not a mapping of keys to values")
        raw = {k: v for k, v in base.items() if k not in _GRID_AXES}
    if args.mechanism is not None:
        raw["mechanism"] = args.mechanism
        raw.pop("thermo", None)
        raw.pop("transport", None)
    if args.thermo is not None:
        raw["thermo"] = args.thermo
    elif "mechanism" not in raw:
        raise InputError("--mechanism", "is required (or a --config that names one)")
    feed = (args.fuel, args.oxidizer, args.phi)
    if args.composition is not None and any(v is not None for v in feed):
        raise InputError("--composition", "give either --composition or --fuel/--oxidizer/--phi, not both")
    if args.composition is not None:
        raw["compositions"] = [{"name": "mixture", "composition": args.composition}]
    elif all(v is not None for v in feed):
        raw["feed"] = {"fuel": args.fuel, "oxidizer": args.oxidizer, "equivalence_ratio": [args.phi]}
    else:
        raise InputError("--composition", "is required (or all three of --fuel, --oxidizer and --phi)")
    raw.update({"reactors": [args.reactor], "temperature": [args.temperature], "pressure": [args.pressure]})
    if args.phase is not None:
        raw["phase"] = args.phase
    if args.max_time is not None:
        key = "isothermal_max_time" if args.reactor == "isothermal" else "max_time"
        raw["stop"] = {**(raw.get("stop") or {}), key: args.max_time}
    if args.max_samples is not None:
        raw["storage"] = {**(raw.get("storage") or {}), "max_samples": args.max_samples}
    if args.no_sea:
        raw["sea"] = {**(raw.get("sea") or {}), "enabled": False}
    elif args.sea_metrics is not None:
        metrics = [m.strip() for m in args.sea_metrics.split(",") if m.strip()]
        raw["sea"] = {**(raw.get("sea") or {}), "enabled": True, "metrics": metrics}
    return raw


def cmd_case(args) -> int:
    from . import config as config_mod, grid as grid_mod, runner

    from . import mechanism

    try:
        config = config_mod.validate(_case_config(args))
        config = mechanism.convert_keyword_format(config, Path(args.out).parent / "mechanisms", report=_note)
        grid = grid_mod.expand(config)
        runner.RunSettings.from_config(config)  # the SEA settings, before anything runs
    except InputError as err:
        field = _CASE_FIELDS.get(err.field, err.field)
        if field.startswith("sea.metrics"):
            field = "--sea-metrics"
        raise InputError(field, err.message) from None
    out = Path(args.out)
    if out.suffix != ".nc":
        raise InputError("--out", f"must name a .nc file, got '{out}'")
    if not out.parent.is_dir() or not os.access(out.parent, os.W_OK):
        raise runner.storage_error(out.parent, PermissionError(errno.EACCES, "not writable"), str(out.name),
                                   "nothing was run")
    try:
        ds = runner.run_single(config, grid.cases[0], out)
    except OSError as err:
        raise runner.storage_error(out.parent, err, str(out.name), "nothing was written") from None
    print(f"{out}: {ds.attrs['status']}" + (f" ({ds.attrs['reason']})" if ds.attrs["reason"] else ""))
    return EXIT_CASES_FAILED if ds.attrs["status"] == "failed" else 0


def cmd_show(args) -> int:
    from . import report, store

    with store.open_input(args.file, "file") as ds:
        if "case_id" not in ds.attrs:
            raise InputError("file", f"'{args.file}' is not a case file (no case_id attribute); `show` reads the "
                             "files under cases/, and xarray opens summaries and the others")
    if args.json:
        print(json.dumps(report.case_record(args.file, top=args.top), indent=1, default=str))
    else:
        print(report.describe_case(args.file, top=args.top))
    return 0


def cmd_estimate(args) -> int:
    from . import cost

    if args.sample < 1 or args.cores < 1:
        raise InputError("--sample" if args.sample < 1 else "--cores", "must be a whole number >= 1")
    config = _load_config(args.config)
    result = cost.estimate(config, n_sample=args.sample, cores=args.cores,
                           report=say)
    print(json.dumps(cost.estimate_record(result), indent=1) if args.json else cost.format_estimate(result))
    return 0


def cmd_bench(args) -> int:
    from . import bench

    results = bench.run(quick=args.quick, report=say,
                        only=tuple(args.only or bench.SECTIONS), workflow=args.workflow)
    print(json.dumps(results, indent=1, default=float) if args.json else bench.format_table(results))
    return 0


def _available_cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def _version() -> str:
    from importlib.metadata import version

    from . import __version__

    return f"sigmagrid {__version__} (Cantera {version('cantera')}, numba {version('numba')})"


class _Parser(argparse.ArgumentParser):
    """argparse with bad options reported as every other bad input: one line naming the field
    and what is allowed, exit status 2 (argparse's own prints the usage first)."""

    def error(self, message):
        message = re.sub(r"^argument ([^:]+): ", lambda m: m.group(1).split("/")[0] + ": ", message)
        sys.stderr.write(f"sigmagrid: error: {message} (options: {self.prog} --help)\n")
        sys.exit(2)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="sigmagrid", description="Relaxation of reacting mixtures to "
                                     "equilibrium with per-reaction entropy production, over a grid of cases.")
    parser.add_argument("--version", action="version", version=_version())
    loudness = parser.add_mutually_exclusive_group()
    loudness.add_argument("-q", "--quiet", action="store_true", help="errors only on stderr (data still on stdout)")
    loudness.add_argument("-v", "--verbose", action="store_true", help="more detail on stderr (each case's SEA paths)")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("init", help="write a commented starter config")
    p.add_argument("file", help="the new config file, .yaml (never overwritten)")
    p.set_defaults(func=cmd_init)

    p = sub.add_parser("check", help="check a config: every problem at once, or a summary of its grid")
    p.add_argument("config")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("cases", help="list the cases a config expands to")
    p.add_argument("config")
    p.add_argument("--json", action="store_true", help="JSON for scripts instead of a table")
    p.set_defaults(func=cmd_cases)

    p = sub.add_parser("run", help="run a whole grid in this process (no Snakemake)")
    p.add_argument("config")
    p.add_argument("--results", default="results", help="output folder (default: results)")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("batch", help="run one batch of a grid's cases (used by the workflow)")
    p.add_argument("config")
    p.add_argument("--index", type=int, required=True, help="batch number, from 0")
    p.add_argument("--out-dir", default="results/cases", help="folder of the case files (default: results/cases)")
    p.set_defaults(func=cmd_batch)

    p = sub.add_parser("summarize", help="combine case files into summary.nc and cases.csv")
    p.add_argument("files", nargs="+")
    p.add_argument("--summary", default="results/summary.nc")
    p.add_argument("--table", default="results/cases.csv")
    p.add_argument("--workers", type=_positive_int, default=None,
                   help="processes that read the case files (default: the available cores, at most 4)")
    p.set_defaults(func=cmd_summarize)

    p = sub.add_parser("case", help="run one case to one file")
    p.add_argument("--config", default=None, metavar="FILE",
                   help="take the settings (and mechanism) of this grid config; the case's own values replace its axes")
    p.add_argument("--mechanism", default=None, help="mechanism file or a name Cantera ships")
    p.add_argument("--thermo", default=None, metavar="FILE",
                   help="thermo data of a mechanism in the keyword text format, where they are not inside it")
    p.add_argument("--phase", default=None, help="ideal-gas phase of a file that defines several (default: the first)")
    p.add_argument("--reactor", required=True, choices=("isolated", "constant-pressure", "isothermal"),
                   help="the reactor: held (U, V), (H, P) or (T, P)")
    p.add_argument("--temperature", type=float, required=True, help="initial temperature, K")
    p.add_argument("--pressure", type=float, required=True, help="initial pressure, Pa")
    p.add_argument("--composition", default=None, help="mole-based, e.g. 'H2:2,O2:1,N2:3.76'")
    p.add_argument("--fuel", default=None, help="fuel of the feed form, e.g. 'CH4:1' (with --oxidizer, --phi)")
    p.add_argument("--oxidizer", default=None, help="oxidizer of the feed form, e.g. 'O2:1,N2:3.76'")
    p.add_argument("--phi", type=float, default=None, help="equivalence ratio of the feed form, 1")
    p.add_argument("--out", required=True, help="output file, .nc")
    p.add_argument("--max-time", type=float, default=None, help="s (default 10; isothermal 1e6)")
    p.add_argument("--max-samples", type=int, default=None, help="stored samples (default 500)")
    sea = p.add_mutually_exclusive_group()
    sea.add_argument("--no-sea", action="store_true", help="skip the steepest-entropy-ascent comparison")
    sea.add_argument("--sea-metrics", default=None, metavar="LIST",
                     help="comma-separated SEA metrics (default: the config's, else the four defaults)")
    p.set_defaults(func=cmd_case)

    p = sub.add_parser("estimate", help="estimate a grid's time and disk from a few sample cases")
    p.add_argument("config")
    p.add_argument("--sample", type=int, default=4, help="cases to run as a sample (default 4)")
    p.add_argument("--cores", type=int, default=_available_cores(),
                   help="cores the grid will run on (default: this machine's, %(default)s)")
    p.add_argument("--json", action="store_true", help="JSON for scripts instead of text")
    p.set_defaults(func=cmd_estimate)

    p = sub.add_parser("bench", help="measure the pipeline against bare Cantera (prints figures)")
    p.add_argument("--quick", action="store_true", help="under a minute instead of under 15 minutes")
    p.add_argument("--json", action="store_true", help="JSON for scripts instead of a table")
    p.add_argument("--only", action="append", choices=("observe", "sea", "query", "grid", "large"),
                   help="measure only this part (repeatable; default all)")
    p.add_argument("--workflow", default=None, metavar="FOLDER",
                   help="project folder holding the Snakefile, for the grid part (default: the current folder)")
    p.set_defaults(func=cmd_bench)

    p = sub.add_parser("show", help="readable summary of a case file")
    p.add_argument("file")
    p.add_argument("--top", type=_positive_int, default=TABLE_ROWS,
                   help=f"how many reactions to list (default {TABLE_ROWS})")
    p.add_argument("--json", action="store_true", help="JSON for scripts instead of text")
    p.set_defaults(func=cmd_show)

    from . import cli_rank  # resample, rank, cut, assess-cut, cut-report, reduce, query

    cli_rank.add_commands(sub)
    from . import cli_plot

    cli_plot.add_commands(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    set_level(QUIET if args.quiet else VERBOSE if args.verbose else NORMAL)
    try:
        return args.func(args)
    except InputError as err:
        print(f"sigmagrid: error: {err.field}: {err.message}", file=sys.stderr)
        return EXIT_INPUT
    except FormatError as err:  # a file of another layout: recompute it
        print(f"sigmagrid: error: {err}", file=sys.stderr)
        return EXIT_INPUT
    except StorageError as err:
        print(f"sigmagrid: error: {err.message}", file=sys.stderr)
        return EXIT_STORAGE
    except BrokenPipeError:  # output piped into head or less that closed early
        sys.stdout = open(os.devnull, "w")
        return 0
    except KeyboardInterrupt:
        print("sigmagrid: interrupted; finished case files are kept, rerun to continue", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
