# Figures and the Snakemake report: per-case figures for the configured subset of cases, grid
# figures from the summary (and the ranking and cuts when those rules are in the workflow).
# `snakemake --report results/report.html` after a run collects every PNG with its caption.
from sigmagrid.grid import select_cases
from sigmagrid.safety import CAUTION

try:
    FIGURE_CASES = select_cases(GRID.cases, CONFIG["figures"]["cases"])
except InputError as err:
    sys.stderr.write(f"sigmagrid: error: {err.field}: {err.message}\n")
    sys.exit(2)

CASE_LABEL = {c.case_id: c.label for c in GRID.cases}
# the ranking and cut rules live in rank.smk; without them the grid figures skip those charts
_RANKING = f"{RESULTS}/ranking.nc" if "RANK_TARGETS" in globals() else None
_REDUCTION = f"{RESULTS}/reduction.nc" if "RANK_TARGETS" in globals() else None


report: "../report/workflow.rst"


# Per-case figures in a few jobs of about 4 cases (at most 8 jobs): drawing a case takes a few
# seconds, and starting the interpreter with its imports for it about 2 s more.
_FIGURE_JOBS = max(1, min(-(-len(FIGURE_CASES) // 4), 8))
_FIGURE_BATCHES = [FIGURE_CASES[i::_FIGURE_JOBS] for i in range(_FIGURE_JOBS)]

for _index, _cases in enumerate(_FIGURE_BATCHES):

    rule:
        name:
            f"case_figures_{_index:03d}"
        input:
            [f"{RESULTS}/cases/{c.case_id}.nc" for c in _cases],
        output:
            [
                report(
                    directory(f"{RESULTS}/figures/cases/{c.case_id}"),
                    patterns=["{figure}.png"],
                    caption="../report/case_figures.rst",
                    category="Per-case figures",
                    subcategory=c.label,
                    labels=lambda w, label=c.label: {"case": label, "figure": w.figure},
                )
                for c in _cases
            ],
        params:
            top=CONFIG["figures"]["top_reactions"],
            caution=CAUTION,
        log:
            f"{RESULTS}/logs/figures_cases_{_index:03d}.log",
        shell:
            "{SIGMAGRID} plot-cases {input} --out-dir {RESULTS}/figures/cases --top {params.top} > {log} 2>&1"


rule grid_figures:
    input:
        summary=f"{RESULTS}/summary.nc",
        tables=[p for p in (_RANKING, _REDUCTION) if p],
    output:
        report(
            directory(f"{RESULTS}/figures/grid"),
            patterns=["{figure}.png"],
            caption="../report/grid_figures.rst",
            category="Grid figures",
            labels=lambda w: {"figure": w.figure},
        ),
    params:
        tables=(f"--ranking {_RANKING} " if _RANKING else "") + (f"--reduction {_REDUCTION}" if _REDUCTION else ""),
        top=CONFIG["figures"]["ranking_top"],
        caution=CAUTION,
    log:
        f"{RESULTS}/logs/figures_grid.log",
    shell:
        "{SIGMAGRID} plot-grid {input.summary} --out-dir {output} {params.tables} --top {params.top} > {log} 2>&1"


FIGURE_TARGETS = [f"{RESULTS}/figures/cases/{c.case_id}" for c in FIGURE_CASES] + [f"{RESULTS}/figures/grid"]


rule figures:
    input:
        FIGURE_TARGETS,
