# The demo manuscript's data: an invented river-monitoring network, generated deterministically.
import figkit.workflow


rule demo_data:
    output:
        "data/readings.csv",
        "data/surveys.csv",
        "data/sites.csv",
    shell:
        f"{figkit.workflow.job_python()} -m figkit.demo data"
