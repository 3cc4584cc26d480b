# Validate the config and expand the grid before any rule runs; bad input stops here with one line.
import json
import os
import sys

from sigmagrid import config as sg_config
from sigmagrid import grid as sg_grid
from sigmagrid.errors import InputError

try:
    CONFIG = sg_config.validate(dict(config))
    GRID = sg_grid.expand(CONFIG, project_root=os.getcwd())
except InputError as err:
    sys.stderr.write(f"sigmagrid: error: {err.field}: {err.message}\n")
    sys.exit(2)

RESULTS = "results"
# the same interpreter that runs Snakemake, so an unactivated virtual environment still works
SIGMAGRID = f'"{sys.executable}" -m sigmagrid'
BATCHES = GRID.batches(CONFIG["batch"]["cases_per_job"])
FROZEN_CONFIG = f"{RESULTS}/run/config.json"


def case_file(case):
    return f"{RESULTS}/cases/{case.case_id}.nc"


ALL_CASE_FILES = [case_file(c) for batch in BATCHES for c in batch]
