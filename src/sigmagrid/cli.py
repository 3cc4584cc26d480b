"""The ``sigmagrid`` command.

    sigmagrid cases CONFIG              list the cases a config expands to, before running
    sigmagrid run CONFIG [--results D]  run the whole grid in this process (no Snakemake)
    sigmagrid case --mechanism ...      run one case to one file
    sigmagrid show FILE.nc              readable summary of a case file
    sigmagrid batch CONFIG --index K    run batch K of a grid (what the workflow calls)
    sigmagrid summarize FILES... --summary S --table T
    sigmagrid plot FILE.nc [--out D]    per-case figures (more in cli_plot.py)

Bad input ends with one line naming the field, exit status 2, and no output file. A results
folder that refuses a file (full disk, read-only, gone) ends with one line, exit status 74.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

from .errors import InputError, StorageError
from .fileformat import FormatError

EXIT_INPUT = 2
EXIT_STORAGE = 74  # EX_IOERR of sysexits.h

# One BLAS thread per process, unless the user asks otherwise: the matrices here are small (53 x
# 53, 53 x 325) and grid runs already use every core with processes. With the other core busy,
# multi-threaded OpenBLAS took 16-46 ms for the near-equilibrium spectra of one metric against 1 ms
# single-threaded, and 7 ms against 1 ms for a point of the Arrhenius fit's scan (gri30 bench
# case, 2026-12-03). Snakemake sets the same variables for its jobs; they only take effect before
# numpy is imported, which the command does lazily.
for _variable in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")


def _load_config(path: str) -> dict:
    from . import config as config_mod

    if path.endswith(".json"):
        try:
            raw = json.loads(config_mod.read_config_text(path))
        except (json.JSONDecodeError, RecursionError) as err:
            raise InputError("config file", f"'{path}' is not valid JSON: {err}") from None
        return config_mod.validate(raw)
    return config_mod.load(path)


def cmd_cases(args) -> int:
    from . import grid as grid_mod

    config = _load_config(args.config)
    grid = grid_mod.expand(config)
    batches = grid.batches(config["batch"]["cases_per_job"])
    print(f"# {len(grid.cases)} cases in {len(batches)} batches of up to {config['batch']['cases_per_job']}; "
          f"mechanism {grid.mechanism_path.name} (sha256 {grid.mechanism_sha256[:12]})")
    from . import mechanism

    for note in mechanism.describe(grid.gas).notes:
        print(f"note: {note}", file=sys.stderr)
    print(f"{'case_id':16}  {'reactor':17}  {'mixture':10}  {'phi [1]':>8}  {'T0 [K]':>8}  {'P0 [Pa]':>10}  label")
    for c in sorted(grid.cases, key=lambda c: c.label):
        print(f"{c.case_id:16}  {c.reactor:17}  {c.composition_name:10}  {c.equivalence_ratio:8.3g}  "
              f"{c.temperature:8.1f}  {c.pressure:10.4g}  {c.label}")
    return 0


def cmd_run(args) -> int:
    from . import runner

    config = _load_config(args.config)
    summary = runner.run_grid(config, args.results, report=lambda line: print(line, flush=True))
    counts = {s: int((summary["status"] == s).sum()) for s in ("relaxed", "not-relaxed", "failed")}
    print(f"summary: {args.results}/summary.nc, {args.results}/cases.csv; " +
          ", ".join(f"{v} {k}" for k, v in counts.items()))
    return 0


def cmd_batch(args) -> int:
    from . import grid as grid_mod, runner

    config = _load_config(args.config)
    grid = grid_mod.expand(config)
    batches = grid.batches(config["batch"]["cases_per_job"])
    if not 0 <= args.index < len(batches):
        raise InputError("--index", f"must be between 0 and {len(batches) - 1}, got {args.index}")
    runner.run_cases(config, list(batches[args.index]), args.out, report=lambda line: print(line, flush=True),
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


_CASE_FIELDS = {"mechanism": "--mechanism", "phase": "--phase", "reactors[0]": "--reactor", "temperature[0]": "--temperature",
                "pressure[0]": "--pressure", "compositions[0].composition": "--composition",
                "stop.max_time": "--max-time",
                "stop.isothermal_max_time": "--max-time", "storage.max_samples": "--max-samples"}


def cmd_case(args) -> int:
    from . import config as config_mod, grid as grid_mod, runner

    raw = {"mechanism": args.mechanism, "reactors": [args.reactor], "temperature": [args.temperature],
           "pressure": [args.pressure], "compositions": [{"name": "mixture", "composition": args.composition}]}
    if args.phase is not None:
        raw["phase"] = args.phase
    if args.max_time is not None:
        raw["stop"] = {"isothermal_max_time" if args.reactor == "isothermal" else "max_time": args.max_time}
    if args.max_samples is not None:
        raw["storage"] = {"max_samples": args.max_samples}
    try:
        config = config_mod.validate(raw)
        grid = grid_mod.expand(config)
    except InputError as err:
        raise InputError(_CASE_FIELDS.get(err.field, err.field), err.message) from None
    out = Path(args.out)
    if out.suffix != ".nc":
        raise InputError("--out", f"must name a .nc file, got '{out}'")
    ds = runner.run_single(config, grid.cases[0], out)
    print(f"{out}: {ds.attrs['status']}" + (f" ({ds.attrs['reason']})" if ds.attrs["reason"] else ""))
    return 0


def cmd_show(args) -> int:
    from . import report

    print(report.describe_case(args.file, top=args.top))
    return 0


def cmd_estimate(args) -> int:
    from . import cost

    if args.sample < 1 or args.cores < 1:
        raise InputError("--sample" if args.sample < 1 else "--cores", "must be a whole number >= 1")
    config = _load_config(args.config)
    result = cost.estimate(config, n_sample=args.sample, cores=args.cores,
                           report=lambda line: print(line, file=sys.stderr, flush=True))
    print(cost.format_estimate(result))
    return 0


def cmd_bench(args) -> int:
    from . import bench

    results = bench.run(quick=args.quick, report=lambda line: print(line, file=sys.stderr, flush=True),
                        only=tuple(args.only or bench.SECTIONS))
    print(json.dumps(results, indent=1, default=float) if args.json else bench.format_table(results))
    return 0


def _positive_int(text: str) -> int:
    """An argparse type: an integer >= 1 (the message names the allowed values)."""
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, not {text!r}")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="sigmagrid", description="Relaxation of reacting mixtures to "
                                     "equilibrium with per-reaction entropy production, over a grid of cases.")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("cases", help="list the cases a config expands to")
    p.add_argument("config")
    p.set_defaults(func=cmd_cases)

    p = sub.add_parser("run", help="run a whole grid in this process (no Snakemake)")
    p.add_argument("config")
    p.add_argument("--results", default="results", help="output folder (default: results)")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("batch", help="run one batch of a grid's cases (used by the workflow)")
    p.add_argument("config")
    p.add_argument("--index", type=int, required=True, help="batch number, from 0")
    p.add_argument("--out", default="results/cases", help="folder of the case files")
    p.set_defaults(func=cmd_batch)

    p = sub.add_parser("summarize", help="combine case files into summary.nc and cases.csv")
    p.add_argument("files", nargs="+")
    p.add_argument("--summary", default="results/summary.nc")
    p.add_argument("--table", default="results/cases.csv")
    p.add_argument("--workers", type=_positive_int, default=None,
                   help="processes that read the case files (default: the available cores, at most 4)")
    p.set_defaults(func=cmd_summarize)

    p = sub.add_parser("case", help="run one case to one file")
    p.add_argument("--mechanism", required=True, help="mechanism file or a name Cantera ships")
    p.add_argument("--phase", default=None, help="ideal-gas phase of a file that defines several (default: the first)")
    p.add_argument("--reactor", required=True, help="isolated, constant-pressure or isothermal")
    p.add_argument("--temperature", type=float, required=True, help="initial temperature, K")
    p.add_argument("--pressure", type=float, required=True, help="initial pressure, Pa")
    p.add_argument("--composition", required=True, help="mole-based, e.g. 'H2:2,O2:1,N2:3.76'")
    p.add_argument("--out", required=True, help="output file, .nc")
    p.add_argument("--max-time", type=float, default=None, help="s (default 10; isothermal 1e6)")
    p.add_argument("--max-samples", type=int, default=None, help="stored samples (default 500)")
    p.set_defaults(func=cmd_case)

    p = sub.add_parser("estimate", help="estimate a grid's time and disk from a few sample cases")
    p.add_argument("config")
    p.add_argument("--sample", type=int, default=4, help="cases to run as a sample (default 4)")
    p.add_argument("--cores", type=int, default=2, help="cores the grid will run on (default 2)")
    p.set_defaults(func=cmd_estimate)

    p = sub.add_parser("bench", help="measure the pipeline against bare Cantera (prints figures)")
    p.add_argument("--quick", action="store_true", help="under a minute instead of under 15 minutes")
    p.add_argument("--json", action="store_true", help="JSON for scripts instead of a table")
    p.add_argument("--only", action="append", choices=("observe", "sea", "query", "grid", "large"),
                   help="measure only this part (repeatable; default all)")
    p.set_defaults(func=cmd_bench)

    p = sub.add_parser("show", help="readable summary of a case file")
    p.add_argument("file")
    p.add_argument("--top", type=int, default=8, help="how many reactions to list")
    p.set_defaults(func=cmd_show)

    from . import cli_rank  # resample, rank, cut, assess-cut, cut-report, reduce, query

    cli_rank.add_commands(sub)
    from . import cli_plot

    cli_plot.add_commands(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
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
