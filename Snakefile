# figkit's demo manuscript.  Build every figure of config/figures.tsv:  snakemake --cores 2
import figkit.workflow

configfile: "config/config.yaml"

include: figkit.workflow.demo_rules()
include: figkit.workflow.rules()
