# sigmagrid workflow: config -> grid -> batches of cases -> per-case netCDF -> summary.
# The rules are thin: every one calls the sigmagrid library through its command line.
from snakemake.utils import min_version

min_version("8.0")


configfile: "config/config.yaml"


include: "workflow/rules/common.smk"
include: "workflow/rules/cases.smk"
include: "workflow/rules/summary.smk"
include: "workflow/rules/rank.smk"
include: "workflow/rules/figures.smk"


rule all:
    input:
        f"{RESULTS}/summary.nc",
        f"{RESULTS}/cases.csv",
        RANK_TARGETS,
        FIGURE_TARGETS,
    default_target: True
