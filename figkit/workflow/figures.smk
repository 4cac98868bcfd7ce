# figkit figure rules: one job per sheet row.  Included by a project's Snakefile.
#
# A figure's job reruns when its dataset file(s) or style files change (file inputs), when its own
# sheet row or the settings it reads change (params "fingerprint"), or when figkit's version
# changes (part of the fingerprint).  The sheet file itself is not an input, so editing one row
# reruns only that figure.
import sys
import shlex
from snakemake.utils import min_version, validate

import figkit
from figkit.errors import FigkitError
from figkit.sheet import read_sheet, schema_path, validate_config
from figkit.spec import build_spec, fingerprint

min_version("9.0")

validate(config, schema_path("config"))          # structure, with defaults filled in
FK_CONFIG = validate_config(config, ".")
FK_ROWS = read_sheet(FK_CONFIG.sheet_path)
FK_RESULTS = FK_CONFIG["results"]
FK_FORMATS = FK_CONFIG["formats"]
FK_BY_ID = {row.id: row for row in FK_ROWS}


def _row_inputs(wildcards):
    """Dataset and style files of one figure; a row that cannot be read depends on nothing and
    fails in its own job with its one-line message."""
    row = FK_BY_ID[wildcards.id]
    try:
        spec = build_spec(row, FK_CONFIG)
    except FigkitError:
        return []
    return [str(spec.data_path)] + [str(p) for p in spec.style.files]


for _row in FK_ROWS:
    if _row.error is not None:
        sys.stderr.write(f"figkit: {_row.error} (this figure will fail; the others build)\n")


rule all_figures:
    input:
        [f"{FK_RESULTS}/figures/{row.id}.json" for row in FK_ROWS],


def _figure_outputs():
    out = [f"{FK_RESULTS}/figures/{{id}}.json", f"{FK_RESULTS}/figures/{{id}}.stats.csv"]
    for fmt in FK_FORMATS:
        path = f"{FK_RESULTS}/figures/{{id}}.{fmt}"
        if fmt == "png":   # the HTML report (snakemake --report) shows every figure's PNG
            path = report(path, caption="report/caption.rst", category="Figures",
                          labels=lambda w: {"figure": w.id})
        out.append(path)
    return out


rule figure:
    input:
        _row_inputs,
    output:
        _figure_outputs(),
    params:
        fingerprint=lambda w: fingerprint(FK_BY_ID[w.id], FK_CONFIG),
        caption=lambda w: FK_BY_ID[w.id].cells.get("caption", ""),
        chart=lambda w: FK_BY_ID[w.id].cells.get("chart", ""),
    wildcard_constraints:
        id="[A-Za-z0-9][A-Za-z0-9_-]*",
    shell:
        f"{shlex.quote(sys.executable)} -m figkit render --id {{wildcards.id}}"
