rule summary:
    input:
        cases=ALL_CASE_FILES,
    output:
        summary=f"{RESULTS}/summary.nc",
        table=f"{RESULTS}/cases.csv",
    log:
        f"{RESULTS}/logs/summary.log",
    # no threads directive: the summary reads its files in as many processes as the cores it may
    # use (at most 4); asking Snakemake for 4 threads made the SLURM executor request 4 CPUs,
    # which a 2-CPU partition never grants
    shell:
        "{SIGMAGRID} summarize {input.cases} --summary {output.summary} --table {output.table} > {log} 2>&1"
