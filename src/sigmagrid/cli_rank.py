"""Subcommands for progress resampling, ranking, reduced mechanisms and queries.

    sigmagrid resample FILES... --out progress.nc        cases on one progress grid
    sigmagrid rank FILES... --summary S --table T --out N rank reactions by entropy produced
    sigmagrid cut CONFIG --ranking N --out-dir D          write the reduced mechanisms
    sigmagrid assess-cut CONFIG --mechanism M ...         rerun cases on one reduced mechanism
    sigmagrid cut-report CONFIG --ranking N ...           reduction.csv / reduction.nc
    sigmagrid reduce CONFIG [--results D]                 all of the above in this process
    sigmagrid query top|cases|at|reaction|bench ...       questions to a finished grid

Kept apart from ``cli.py`` so that the core commands stay short; ``cli.build_parser`` calls
:func:`add_commands`.
"""

from __future__ import annotations

from pathlib import Path

from .errors import TABLE_ROWS, InputError, positive_int
from .messages import say as _say


def _config(path: str) -> dict:
    from .cli import _load_config

    return _load_config(path)


def _existing(path: str, what: str) -> str:
    if not Path(path).is_file():
        raise InputError(what, f"'{path}' does not exist")
    return path


def cmd_resample(args) -> int:
    from . import progress

    points = args.points
    if points is None and args.config:
        points = int(_config(args.config)["progress_grid"]["points"])
    points = points or progress.DEFAULT_POINTS
    if points < 3:
        raise InputError("--points", f"must be at least 3, got {points}")
    try:
        ds = progress.write(args.files, args.out, points, report=_say)
    except ValueError as err:  # no readable case file
        raise InputError("files", str(err)) from None
    _say(f"wrote {args.out}: {ds.sizes['case']} cases x {ds.sizes['progress']} progress levels")
    return 0


def cmd_rank(args) -> int:
    from . import rank

    config = _config(args.config) if args.config else None
    negligible = args.negligible
    if negligible is None:
        negligible = float(config["reduction"]["negligible"]) if config else 1e-3
    if not 0 < negligible < 1:
        raise InputError("--negligible", f"must be between 0 and 1 (exclusive), got {negligible}")
    try:
        ranking = rank.write_ranking(_existing(args.summary, "--summary"), args.files, args.table, args.out,
                                     negligible, report=_say, config=config)
    except ValueError as err:  # no usable case
        raise InputError("files", str(err)) from None
    flagged = int(ranking["negative_entropy"].sum())
    _say(f"wrote {args.table} and {args.out}: {ranking.sizes['reaction']} reactions over "
          f"{ranking.attrs['n_cases_used']} of {ranking.attrs['n_cases']} cases; "
          f"{flagged} reaction(s) consume entropy somewhere (flagged, not ranked)")
    return 0


def _ranking(path: str):
    from . import query

    return query.open_dataset(path, "--ranking")


def cmd_cut(args) -> int:
    from . import rank

    config = _config(args.config)
    cuts = rank.write_cuts(config, _ranking(args.ranking), args.out_dir, report=_say)
    _say(f"wrote {len(cuts)} reduced mechanism(s) to {args.out_dir}")
    return 0


def cmd_assess_cut(args) -> int:
    from . import query, rank, store

    config = _config(args.config)
    summary = query.open_dataset(args.summary, "--summary")
    name = args.name or Path(args.mechanism).stem
    if not Path(args.mechanism).is_file():
        raise InputError("--mechanism", f"'{args.mechanism}' does not exist")
    full_cases = Path(args.full_cases_dir) if args.full_cases_dir else Path(args.summary).parent / "cases"
    result = rank.assess_cut(config, args.mechanism, summary, args.cases_dir, name=name, report=_say,
                             full_cases_dir=full_cases)
    store.write_atomic(result, args.out)
    failed = int(result["cut_failed"].sum())
    _say(f"wrote {args.out}: cut {name}, {result.sizes['case']} cases, {failed} failed on the cut"
          + (f" ({result.attrs['load_error']})" if result.attrs["load_error"] else ""))
    return 0


def _print_reduction(table, smallest: str, config: dict, as_json: bool = False) -> None:
    """The cut table on stdout: aligned text, or JSON for scripts (every column, units in the
    column names as in reduction.csv)."""
    import json

    from . import query, rank

    if as_json:
        print(json.dumps({"tolerances": rank.tolerances(config), "cuts": json.loads(table.to_json(orient="records")),
                          "smallest_by_criterion": rank.smallest_by_criterion(table),
                          "smallest_within_tolerances": smallest or None}, indent=1))
        return
    shown = table[["cut", "species [1]", "reactions [1]", "failed_cases [1]", "judged_at_end_cases [1]",
                   "ignition_delay_error_max [1]", "ignition_delay_error_median [1]",
                   "equilibrium_temperature_error_max [K]", "entropy_produced_error_max [1]",
                   "largest_error_ratio [1]", "within_tolerances"]]
    print(query.aligned(shown))
    print(f"tolerances: {rank.tolerance_text(config)}")
    for criterion, name in rank.smallest_by_criterion(table).items():
        print(f"smallest {criterion} cut within tolerances: {name or 'none'}")
    print(f"smallest cut within tolerances: {smallest or 'none'}")


def cmd_cut_report(args) -> int:
    from . import rank

    config = _config(args.config)
    names = [name for name, _, _ in rank.cuts(config)]
    validations = None
    if config["reduction"]["validate"] and not args.no_validation:
        validations = {n: Path(args.reduced_dir) / n / "validation.nc" for n in names}
        missing = [str(p) for p in validations.values() if not p.is_file()]
        if missing:
            raise InputError("--reduced-dir", f"missing validation file(s): {', '.join(missing)}")
    ds, table = rank.write_reduction(config, _existing(args.ranking, "--ranking"), args.reduced_dir,
                                     args.table, args.out, validations)
    _print_reduction(table, ds.attrs["smallest_within_tolerances"], config, args.json)
    _say(f"wrote {args.table} and {args.out}")
    return 0


def cmd_reduce(args) -> int:
    from . import rank

    config = _config(args.config)
    summary = rank.reduce_in_process(config, args.results, report=_say)
    _print_reduction(summary["table"], summary["smallest"], config, args.json)
    return 0


# ------------------------------------------------------------------------------------------ query


def _emit(table, fmt: str, note: str = "") -> int:
    from . import query

    text = query.render(table, fmt)
    if note and fmt == "table":
        print(note)
    print(text)
    return 0


def cmd_query_top(args) -> int:
    from . import query

    selection = query.parse_selection(args.select)
    if args.by == "local":
        r = query.open_dataset(args.ranking, "--ranking")
        table = query.top_reactions_local(r, selection, args.top)
        note = (f"# top {len(table)} reactions by largest local share sigma_j/sigma over {table.attrs['cases']} "
                "case(s); reactions that consume entropy last")
    elif args.at is not None:
        p = query.open_dataset(args.progress, "--progress")
        table = query.top_reactions_at(p, args.at, selection, args.top)
        note = f"# top {len(table)} reactions by share of the entropy production at progress {table.attrs['progress']:g}"
    else:
        s = query.open_dataset(args.summary, "--summary")
        table = query.top_reactions(s, selection, args.top, args.by)
        note = f"# top {len(table)} reactions by {args.by} integrated share over {table.attrs['cases']} case(s)"
    return _emit(table, args.format, note)


def cmd_query_cases(args) -> int:
    from . import query

    s = query.open_dataset(args.summary, "--summary")
    cases_dir = args.cases_dir if args.cases_dir else str(Path(args.summary).parent / "cases")
    table = query.case_table(s, query.parse_selection(args.select), cases_dir)
    return _emit(table, args.format, f"# {len(table)} case(s)")


def cmd_query_at(args) -> int:
    from . import query

    p = query.open_dataset(args.progress, "--progress")
    species = [x.strip() for x in args.species.split(",") if x.strip()] if args.species else []
    table = query.at_progress(p, args.level, query.parse_selection(args.select), species)
    return _emit(table, args.format, f"# {len(table)} case(s) at progress {table.attrs['progress']:g}")


def cmd_query_reaction(args) -> int:
    from . import query

    s = query.open_dataset(args.summary, "--summary")
    table = query.reaction_cases(s, args.reaction, query.parse_selection(args.select))
    return _emit(table, args.format, f"# reaction {table.attrs['reaction']} ({table.attrs['equation']}) in "
                                     f"{len(table)} case(s)")


def cmd_query_bench(args) -> int:
    from . import query

    if args.cases < 1 or args.reactions < 1:
        raise InputError("--cases", "the benchmark needs at least one case and one reaction")
    results = query.benchmark(args.cases, args.reactions)
    print(f"# synthetic summary: {args.cases} cases x {args.reactions} reactions; time includes opening the file")
    for name, seconds in results:
        print(f"{seconds:8.3f} s  {name}")
    slowest = max(s for _, s in results)
    print(f"slowest query: {slowest:.3f} s ({'under' if slowest < 1 else 'OVER'} one second)")
    return 0 if slowest < 1 else 1


def _query_common(p, progress: bool = False) -> None:
    p.add_argument("--select", action="append", metavar="NAME=VALUE",
                   help="cases by coordinate: NAME=V, NAME=V1,V2 or NAME=LOW..HIGH (repeatable, all must hold)")
    p.add_argument("--format", default="table", choices=("table", "csv", "json"), help="output format")
    if progress:
        p.add_argument("--progress", default="results/progress.nc", help="progress-resampled file")


def add_commands(sub) -> None:
    """Register the subcommands on the ``sigmagrid`` parser's subparsers object."""
    p = sub.add_parser("resample", help="put every case on one progress grid (progress.nc)")
    p.add_argument("files", nargs="+")
    p.add_argument("--out", default="results/progress.nc")
    p.add_argument("--config", help="validated config (for progress_grid.points)")
    p.add_argument("--points", type=int, default=None, help="cosine-spaced levels (default 101)")
    p.set_defaults(func=cmd_resample)

    p = sub.add_parser("rank", help="rank reactions by the entropy they produce across the grid")
    p.add_argument("files", nargs="+", help="case files")
    p.add_argument("--summary", default="results/summary.nc")
    p.add_argument("--table", default="results/ranking.csv")
    p.add_argument("--out", default="results/ranking.nc")
    p.add_argument("--config", help="config (reduction.negligible; with it the species are ranked for the "
                                    "graph criteria too)")
    p.add_argument("--negligible", type=float, default=None,
                   help="sigma below this fraction of a case's peak is left out of the local share (default 1e-3)")
    p.set_defaults(func=cmd_rank)

    p = sub.add_parser("cut", help="write a reduced mechanism for every criterion and threshold of the config")
    p.add_argument("config")
    p.add_argument("--ranking", default="results/ranking.nc")
    p.add_argument("--out-dir", default="results/reduced")
    p.set_defaults(func=cmd_cut)

    p = sub.add_parser("assess-cut", help="rerun the grid's cases on one reduced mechanism")
    p.add_argument("config")
    p.add_argument("--mechanism", required=True, help="reduced mechanism (YAML)")
    p.add_argument("--summary", default="results/summary.nc", help="summary of the full-mechanism run")
    p.add_argument("--cases-dir", required=True, help="folder for the case files of the reduced run")
    p.add_argument("--out", required=True, help="validation file (.nc)")
    p.add_argument("--name", default="", help="cut name (default: the mechanism file's stem)")
    p.add_argument("--full-cases-dir", default=None,
                   help="case files of the full-mechanism run, to judge cases that stop short of equilibrium "
                        "on the cut at their end time (default: 'cases' beside --summary)")
    p.set_defaults(func=cmd_assess_cut)

    p = sub.add_parser("cut-report", help="size and cost of every cut: reduction.csv and reduction.nc")
    p.add_argument("config")
    p.add_argument("--ranking", default="results/ranking.nc")
    p.add_argument("--reduced-dir", default="results/reduced")
    p.add_argument("--table", default="results/reduction.csv")
    p.add_argument("--out", default="results/reduction.nc")
    p.add_argument("--no-validation", action="store_true", help="report sizes only")
    p.add_argument("--json", action="store_true", help="the cut table as JSON for scripts instead of text")
    p.set_defaults(func=cmd_cut_report)

    p = sub.add_parser("reduce", help="progress grid, ranking, cuts and their validation in this process")
    p.add_argument("config")
    p.add_argument("--results", default="results", help="folder of a finished run (sigmagrid run)")
    p.add_argument("--json", action="store_true", help="the cut table as JSON for scripts instead of text")
    p.set_defaults(func=cmd_reduce)

    q = sub.add_parser("query", help="questions to a finished grid (tables, CSV or JSON)")
    qs = q.add_subparsers(dest="query", required=True)
    p = qs.add_parser("top", help="reactions that produce the most entropy over selected cases")
    p.add_argument("--summary", default="results/summary.nc")
    p.add_argument("--top", type=positive_int, default=TABLE_ROWS, help=f"how many reactions (default {TABLE_ROWS})")
    p.add_argument("--by", default="mean", choices=("mean", "max", "local"),
                   help="mean or largest integrated share over the cases, or the largest local share "
                        "(from --ranking)")
    p.add_argument("--ranking", default="results/ranking.nc", help="ranking file, for --by local")
    p.add_argument("--at", type=float, default=None, metavar="LEVEL",
                   help="rank by the local share at this progress level (0..1) instead, from --progress")
    _query_common(p, progress=True)
    p.set_defaults(func=cmd_query_top)

    p = qs.add_parser("cases", help="selected cases with status and headline numbers")
    p.add_argument("--summary", default="results/summary.nc")
    p.add_argument("--cases-dir", default=None, help="case files, for SEA agreement (default: next to the summary)")
    _query_common(p)
    p.set_defaults(func=cmd_query_cases)

    p = qs.add_parser("at", help="state of selected cases at one progress level")
    p.add_argument("level", type=float, help="progress, 0..1")
    p.add_argument("--species", default="", help="mole fractions to show, comma-separated")
    _query_common(p, progress=True)
    p.set_defaults(func=cmd_query_at)

    p = qs.add_parser("reaction", help="one reaction's integrated share and entropy produced in each selected case")
    p.add_argument("reaction", help="reaction index (the files' reaction coordinate) or its equation, quoted")
    p.add_argument("--summary", default="results/summary.nc")
    _query_common(p)
    p.set_defaults(func=cmd_query_reaction)

    p = qs.add_parser("bench", help="time the queries on a synthetic 1,000-case summary")
    p.add_argument("--cases", type=int, default=1000)
    p.add_argument("--reactions", type=int, default=325)
    p.set_defaults(func=cmd_query_bench)

