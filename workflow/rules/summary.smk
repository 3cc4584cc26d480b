rule summary:
    input:
        cases=ALL_CASE_FILES,
    output:
        summary=f"{RESULTS}/summary.nc",
        table=f"{RESULTS}/cases.csv",
    log:
        f"{RESULTS}/logs/summary.log",
    shell:
        "{SIGMAGRID} summarize {input.cases} --summary {output.summary} --table {output.table} > {log} 2>&1"
