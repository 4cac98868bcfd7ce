# figkit's demo manuscript.  Build every figure of config/figures.tsv:  snakemake --cores 2
import figkit.workflow

configfile: "config/config.yaml"

include: figkit.workflow.rules()       # one job per sheet row, and the HTML report
include: figkit.workflow.demo_rules()  # generates data/ (an invented river-monitoring network)


rule all:  # the default target (Snakemake takes it from this file, not from an include)
    input:
        rules.all_figures.input,
