# One job per batch of cases so that start-up cost does not dominate; a failing case is written
# with status "failed" and does not stop its batch.


for _index, _batch in enumerate(BATCHES):

    rule:
        name:
            f"cases_batch_{_index:04d}"
        input:
            CASES_CONFIG,
        output:
            [case_file(c) for c in _batch],
        params:
            index=_index,
        log:
            f"{RESULTS}/logs/batch_{_index:04d}.log",
        shell:
            "{SIGMAGRID} batch {input} --index {params.index} --out-dir {RESULTS}/cases > {log} 2>&1"
