"""The Snakemake rules that ship with figkit, so any manuscript folder builds with the installed
package and copies none of its code: its Snakefile includes :func:`rules`."""
from pathlib import Path

HERE = Path(__file__).parent


def rules() -> str:
    """Path of the figure rules, for ``include:`` in a Snakefile."""
    return str(HERE / "figures.smk")


def demo_rules() -> str:
    """Path of the rule that generates the demo manuscript's data (used by figkit's own repo)."""
    return str(HERE / "demo.smk")
