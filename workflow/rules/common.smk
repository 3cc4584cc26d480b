# Validate the config and expand the grid before any rule runs; bad input stops here with one line.
import hashlib
import json
import os
import sys

from sigmagrid import config as sg_config
from sigmagrid import grid as sg_grid
from sigmagrid import mechanism as sg_mechanism
from sigmagrid.errors import InputError
from sigmagrid.atomic import write_text_atomic

try:
    CONFIG = sg_config.validate(dict(config))
    # a mechanism in the keyword text format: converted once into results/mechanisms, then YAML
    CONFIG = sg_mechanism.convert_keyword_format(
        CONFIG, "results/mechanisms", report=lambda line: sys.stderr.write(f"note: {line}\n"), root=os.getcwd())
    GRID = sg_grid.expand(CONFIG, project_root=os.getcwd())
except InputError as err:
    sys.stderr.write(f"sigmagrid: error: {err.field}: {err.message}\n")
    sys.exit(2)

RESULTS = "results"
# the same interpreter that runs Snakemake, so an unactivated virtual environment still works
SIGMAGRID = f'"{sys.executable}" -m sigmagrid'
BATCHES = GRID.batches(CONFIG["batch"]["cases_per_job"])
# Config sections that only steer work after the cases: changing them must rerun no case.
AFTER_CASE_KEYS = ("figures", "reduction", "progress_grid", "inert")


def frozen(kind, part):
    """The validated config as a content-addressed JSON file, written when parsing the workflow.

    A different config gets a different file name, so a second workflow in the same folder can
    never change the file a running one reads, and a changed config changes the jobs' input.
    """
    text = json.dumps(part, sort_keys=True, indent=1)
    path = f"{RESULTS}/run/{kind}-{hashlib.sha256(text.encode()).hexdigest()[:12]}.json"
    if not os.path.exists(path):
        write_text_atomic(text, path)
    return path


CASES_CONFIG = frozen("cases", {k: v for k, v in CONFIG.items() if k not in AFTER_CASE_KEYS})
# without the figures section: changing what is drawn must rerun no ranking either
FROZEN_CONFIG = frozen("config", {k: v for k, v in CONFIG.items() if k != "figures"})


def case_file(case):
    return f"{RESULTS}/cases/{case.case_id}.nc"


ALL_CASE_FILES = [case_file(c) for batch in BATCHES for c in batch]
