# summary -> progress grid, ranking -> reduced mechanisms -> their validation -> reduction table.
# Each cut is validated by its own job (cases rerun on the reduced mechanism, in that job's process);
# its case files stay under results/reduced/<cut>/cases so an interrupted run resumes.
import re


CUTS = [name for name, _, _ in sg_config.cuts(CONFIG)]
VALIDATE_CUTS = bool(CONFIG["reduction"]["validate"])


def reduced_file(cut):
    return f"{RESULTS}/reduced/{cut}.yaml"


rule progress:
    input:
        config=FROZEN_CONFIG,
        cases=ALL_CASE_FILES,
    output:
        f"{RESULTS}/progress.nc",
    log:
        f"{RESULTS}/logs/progress.log",
    shell:
        "{SIGMAGRID} resample {input.cases} --config {input.config} --out {output} > {log} 2>&1"


rule ranking:
    input:
        config=FROZEN_CONFIG,
        summary=f"{RESULTS}/summary.nc",
        cases=ALL_CASE_FILES,
    output:
        table=f"{RESULTS}/ranking.csv",
        ranking=f"{RESULTS}/ranking.nc",
    log:
        f"{RESULTS}/logs/ranking.log",
    shell:
        "{SIGMAGRID} rank {input.cases} --config {input.config} --summary {input.summary} "
        "--table {output.table} --out {output.ranking} > {log} 2>&1"


rule cuts:
    input:
        config=FROZEN_CONFIG,
        ranking=f"{RESULTS}/ranking.nc",
    output:
        [reduced_file(c) for c in CUTS],
    log:
        f"{RESULTS}/logs/cuts.log",
    shell:
        "{SIGMAGRID} cut {input.config} --ranking {input.ranking} --out-dir {RESULTS}/reduced > {log} 2>&1"


rule assess_cut:
    input:
        config=FROZEN_CONFIG,
        summary=f"{RESULTS}/summary.nc",
        mechanism=f"{RESULTS}/reduced/{{cut}}.yaml",
    output:
        f"{RESULTS}/reduced/{{cut}}/validation.nc",
    wildcard_constraints:
        cut="|".join(re.escape(c) for c in CUTS) if CUTS else "(?!)",
    log:
        f"{RESULTS}/logs/assess_{{cut}}.log",
    shell:
        "{SIGMAGRID} assess-cut {input.config} --mechanism {input.mechanism} --summary {input.summary} "
        "--cases-dir {RESULTS}/reduced/{wildcards.cut}/cases --name {wildcards.cut} --out {output} > {log} 2>&1"


rule reduction:
    input:
        config=FROZEN_CONFIG,
        ranking=f"{RESULTS}/ranking.nc",
        mechanisms=[reduced_file(c) for c in CUTS],
        validations=[f"{RESULTS}/reduced/{c}/validation.nc" for c in CUTS] if VALIDATE_CUTS else [],
    output:
        table=report(f"{RESULTS}/reduction.csv", caption="../report/reduction_table.rst", category="Grid figures",
                     labels={"figure": "reduction table"}),
        reduction=f"{RESULTS}/reduction.nc",
    params:
        validation="" if VALIDATE_CUTS else "--no-validation",
    log:
        f"{RESULTS}/logs/reduction.log",
    shell:
        "{SIGMAGRID} cut-report {input.config} --ranking {input.ranking} --reduced-dir {RESULTS}/reduced "
        "--table {output.table} --out {output.reduction} {params.validation} > {log} 2>&1"


RANK_TARGETS = [
    f"{RESULTS}/progress.nc",
    f"{RESULTS}/ranking.csv",
    f"{RESULTS}/ranking.nc",
    f"{RESULTS}/reduction.csv",
    f"{RESULTS}/reduction.nc",
]
