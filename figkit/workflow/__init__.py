"""The Snakemake rules that ship with figkit, so any manuscript folder builds with the installed
package and copies none of its code: its Snakefile includes :func:`rules`."""
import os
import sys
from pathlib import Path

HERE = Path(__file__).parent

PYTHON_VAR = "FIGKIT_PYTHON"


def rules() -> str:
    """Path of the figure rules, for ``include:`` in a Snakefile."""
    return str(HERE / "figures.smk")


def demo_rules() -> str:
    """Path of the rule that generates the demo manuscript's data (used by figkit's own repo)."""
    return str(HERE / "demo.smk")


def job_python() -> str:
    """The interpreter for a rule's shell command, as the text ``"$FIGKIT_PYTHON"``.

    Jobs must run figkit from the interpreter that runs Snakemake (where figkit is installed),
    but Snakemake reruns a job whose command text changed, so the interpreter's path must not
    be in that text: ``python -m snakemake`` and ``.venv/bin/snakemake`` name the same
    interpreter by different paths, and a co-author's clone has its own.  The path goes into
    the environment the jobs inherit instead."""
    os.environ[PYTHON_VAR] = sys.executable
    return f'"${PYTHON_VAR}"'
