"""The Snakemake rules that ship with figkit, so any manuscript folder builds with the installed
package and copies none of its code: its Snakefile includes :func:`rules`."""
import json
import os
import sys
from pathlib import Path

HERE = Path(__file__).parent

PYTHON_VAR = "FIGKIT_PYTHON"
SETTINGS_VAR = "FIGKIT_SETTINGS"


def rules() -> str:
    """Path of the figure rules, for ``include:`` in a Snakefile."""
    return str(HERE / "figures.smk")


def demo_rules() -> str:
    """Path of the rule that generates the demo manuscript's data (used by figkit's own repo)."""
    return str(HERE / "demo.smk")


def job_python() -> str:
    """The interpreter for a rule's shell command: ``"${FIGKIT_PYTHON:-python3}"`` once Snakemake
    has formatted the command (the braces are doubled here for that formatting).

    Jobs must run figkit from the interpreter that runs Snakemake (where figkit is installed),
    but Snakemake reruns a job whose command text changed, so the interpreter's path must not
    be in that text: ``python -m snakemake`` and ``.venv/bin/snakemake`` name the same
    interpreter by different paths, and a co-author's clone has its own.  The path goes into
    the environment the jobs inherit instead.  Where the variable is unset (the command run by
    hand in a fresh login shell), the shell falls back to ``python3`` from PATH."""
    os.environ[PYTHON_VAR] = sys.executable
    return f'"${{{{{PYTHON_VAR}:-python3}}}}"'


def job_settings(settings: dict) -> None:
    """Hand the settings Snakemake resolved (config.yaml, then ``--configfile``, ``--config`` and
    a profile's ``config:``) to every figure job, which would otherwise read config.yaml again.

    They travel in the environment the jobs inherit, not in the command text (a changed command
    reruns a job, and overrides are already in each figure's fingerprint).  A job on a cluster
    node runs under a Snakemake that reads the workflow again with the same overrides, so its
    environment gets the same settings there."""
    os.environ[SETTINGS_VAR] = json.dumps(settings, sort_keys=True, default=str)


def warm_jobs() -> str | None:
    """Let this Snakemake run's figure jobs share one warm interpreter (figkit.warm): name its
    socket, owned by this process, in the environment the jobs inherit (not in the command text,
    which would rerun every figure).  Called each time the workflow is read, so the Snakemake that
    runs a group job on a cluster node names a server of its own there.  ``FIGKIT_WARM=off`` in
    the environment keeps every job in its own interpreter.  Returns the socket's path, or None."""
    from .. import warm
    if os.environ.get(warm.VAR, "").lower() in warm.OFF or not warm.available():
        return None
    try:
        path = warm.socket_path(os.getpid())
    except OSError:          # no private temporary folder: jobs keep their own interpreters
        os.environ.pop(warm.VAR, None)
        return None
    os.environ[warm.VAR] = f"{os.getpid()}:{path}"
    return path


def keep_going_on_node(workflow) -> bool:
    """In the Snakemake that runs a job on a cluster node (Snakemake's remote mode, ``--mode
    remote``: a group job or a single job), build every figure of the job even when one fails;
    that Snakemake still exits non-zero, so the job is reported failed.

    Why here: the main Snakemake's ``--keep-going`` never reaches the node (the arguments it gives
    a spawned job, ``snakemake/spawn_jobs.py`` ``general_args``, do not include it), so without
    this a group job stops at its first failed figure and its later figures are never built.  The
    node's scheduler reads ``workflow.execution_settings.keep_going`` when it is made
    (``snakemake/scheduling/job_scheduler.py``, ``JobScheduler.__init__``).  The settings object
    is put on the workflow only after the Snakefile has been read (``snakemake/api.py``,
    ``execute_workflow``: ``workflow.execution_settings = execution_settings``; it is None while
    the file is read), and the scheduler is made after the DAG is built (``Workflow.execute``), so
    this is called from the first input function (figures.smk, ``_write_stamps``), where setting
    the field of the mutable dataclass takes effect.  Checked against Snakemake 9.27;
    tests/test_cluster.py runs it end to end.  Where a Snakemake has no such
    attribute or refuses the assignment, nothing is changed (the job stops at its first failure,
    as before) and nothing fails.  Returns True when keep-going was set."""
    if not getattr(workflow, "remote_exec", False):
        return False
    settings = getattr(workflow, "execution_settings", None)
    if settings is None or not hasattr(settings, "keep_going"):
        return False
    try:
        settings.keep_going = True
    except (AttributeError, TypeError):   # a frozen settings object (FrozenInstanceError)
        return False
    return True


def settings_from_environment() -> dict | None:
    """The settings a workflow job was given (:func:`job_settings`), or None outside a workflow."""
    text = os.environ.get(SETTINGS_VAR)
    if not text:
        return None
    from ..errors import FigkitError
    try:
        value = json.loads(text)
    except ValueError:
        raise FigkitError(f"the environment variable {SETTINGS_VAR} is not JSON (it is set by "
                          "figkit's Snakemake rules; unset it to read config/config.yaml)") from None
    if not isinstance(value, dict):
        raise FigkitError(f"the environment variable {SETTINGS_VAR} must hold a JSON object",
                          value=type(value).__name__)
    return value


def stop_rate_timers() -> None:
    """Stop the one-second timer Snakemake's job rate limiter (100 jobs per second by default)
    leaves behind after its last scheduling round: the interpreter waits for it before exiting,
    a second added to every build and a third of a one-figure rebuild (benchmarks/, case 6).
    Nothing is scheduled after the end.  Called from ``onsuccess``/``onerror`` in figures.smk;
    a project Snakefile with its own handlers replaces those (Snakemake keeps one of each) and
    only loses the second.  The timer is found by the name of Snakemake's (private) callback;
    if that name changes, nothing is stopped and nothing breaks: any failure here is swallowed
    (an optimisation must never fail a build).  Returns the number of timers stopped."""
    import threading
    stopped = 0
    try:
        for t in threading.enumerate():
            fn = getattr(t, "function", None)
            name = getattr(fn, "__qualname__", None)
            if isinstance(t, threading.Timer) and isinstance(name, str) and RATE_TIMER_NAME in name:
                t.cancel()
                stopped += 1
    except Exception:       # a changed Snakemake: degrade to doing nothing
        return stopped
    return stopped


RATE_TIMER_NAME = "_schedule_reevalutation"   # Snakemake's private callback (its spelling)
