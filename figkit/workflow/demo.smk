# The demo manuscript's data: an invented river-monitoring network, generated deterministically.
import sys
import shlex


rule demo_data:
    output:
        "data/readings.csv",
        "data/surveys.csv",
        "data/sites.csv",
    shell:
        f"{shlex.quote(sys.executable)} -m figkit.demo data"
