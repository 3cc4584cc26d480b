rule summary:
    input:
        cases=ALL_CASE_FILES,
    output:
        summary=f"{RESULTS}/summary.nc",
        table=f"{RESULTS}/cases.csv",
    log:
        f"{RESULTS}/logs/summary.log",
    # reading the case files is most of the work and runs in parallel (Snakemake caps at --cores)
    threads: 4
    shell:
        "{SIGMAGRID} summarize {input.cases} --summary {output.summary} --table {output.table} "
        "--workers {threads} > {log} 2>&1"
