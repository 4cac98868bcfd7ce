"""Several figures in one `figkit render` call: the files are byte-identical to one call per
figure (the outputs are deterministic, see tests/test_reproducible.py), and a bad id among good
ones fails alone with its one-line error."""
from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

from figkit.cli import main


def _hashes(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())
            if p.is_file()}


def test_several_ids_in_one_call_match_one_call_each(tmp_path, capsys):
    proj = tmp_path / "proj"
    assert main(["init", str(proj)]) == 0
    ids = ["oxygen-by-land-use", "taxa-by-season"]
    for fid in ids:
        assert main(["render", "--id", fid, "--project", str(proj)]) == 0
    one_each = _hashes(proj / "results" / "figures")
    shutil.rmtree(proj / "results")
    args = ["render", "--project", str(proj)]
    for fid in ids:
        args += ["--id", fid]
    assert main(args) == 0
    assert _hashes(proj / "results" / "figures") == one_each and len(one_each) >= 10
    # a bad id among good ones: the good figures are built, the bad one named, exit 2
    shutil.rmtree(proj / "results")
    capsys.readouterr()
    assert main(["render", "--project", str(proj), "--id", ids[0], "--id", "nope",
                 "--id", ids[1]]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("figkit: error:") and "nope" in err[0]
    assert _hashes(proj / "results" / "figures") == one_each
