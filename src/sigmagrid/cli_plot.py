"""Subcommands for figures.

    sigmagrid plot FILE.nc [--out-dir DIR] [--top N]  the per-case figures of one case file
    sigmagrid plot-grid SUMMARY.nc --out-dir DIR [--ranking R.csv] [--reduction C.csv]
                                                      maps over the grid, ranking and cut charts

Kept apart from ``cli.py``; ``cli.build_parser`` calls :func:`add_commands`.
"""

from __future__ import annotations

from pathlib import Path

from .config import DEFAULTS
from .errors import InputError, positive_int
from .messages import say as _say

_NAMED = DEFAULTS["figures"]["top_reactions"]  # the workflow's defaults (config figures.*)
_RANKED = DEFAULTS["figures"]["ranking_top"]


def _out_folder(path: Path) -> Path:
    """The figures' folder: refuse a path that exists as something other than a folder."""
    if path.exists() and not path.is_dir():
        raise InputError("--out-dir", f"'{path}' exists and is not a folder")
    return path


def cmd_plot(args) -> int:
    from . import figures

    ds = figures.open_case_file(args.file)  # refuses a file that is not a case file, before any output
    out = _out_folder(Path(args.out_dir) if args.out_dir else Path("figures") / ds.attrs["case_id"])
    figures.plot_case(args.file, out, top=args.top, log=_say)
    return 0


def cmd_plot_cases(args) -> int:
    """Per-case figures of several case files, each into ROOT/<case_id>: one interpreter start for
    a batch (the workflow's way; drawing one case takes a few seconds, starting Python one more)."""
    from . import figures

    root = _out_folder(Path(args.out_dir))
    opened = [figures.open_case_file(f) for f in args.files]  # refuse bad files before any output
    for path, ds in zip(args.files, opened):
        figures.plot_case(path, root / ds.attrs["case_id"], top=args.top, log=_say)
    return 0


def cmd_plot_grid(args) -> int:
    from . import grid_figures

    grid_figures.plot_grid(args.summary, _out_folder(Path(args.out_dir)), ranking=args.ranking, reduction=args.reduction,
                           top=args.top, log=_say)
    return 0


def add_commands(sub) -> None:
    """Register the figure subcommands on the ``sigmagrid`` parser's subparsers."""
    p = sub.add_parser("plot", help="per-case figures of one case file (PNG)")
    p.add_argument("file", help="a case file, results/cases/<case_id>.nc")
    p.add_argument("--out-dir", default=None, help="folder for the figures (default: figures/<case_id>)")
    p.add_argument("--top", type=positive_int, default=_NAMED,
                   help=f"how many reactions to show by name (default {_NAMED})")
    p.set_defaults(func=cmd_plot)

    p = sub.add_parser("plot-cases", help="per-case figures of several case files, into OUT_DIR/<case_id>/")
    p.add_argument("files", nargs="+", help="case files, results/cases/<case_id>.nc")
    p.add_argument("--out-dir", required=True, help="folder holding one folder of figures per case")
    p.add_argument("--top", type=positive_int, default=_NAMED,
                   help=f"how many reactions to show by name (default {_NAMED})")
    p.set_defaults(func=cmd_plot_cases)

    p = sub.add_parser("plot-grid", help="figures over the whole grid from summary.nc (PNG and SVG)")
    p.add_argument("summary", help="results/summary.nc")
    p.add_argument("--out-dir", required=True, help="folder for the figures")
    p.add_argument("--ranking", default=None, help="ranking table (results/ranking.csv), if made")
    p.add_argument("--reduction", default=None, help="cut table (results/reduction.csv), if made")
    p.add_argument("--top", type=positive_int, default=_RANKED, help=f"reactions in the ranking chart (default {_RANKED})")
    p.set_defaults(func=cmd_plot_grid)
