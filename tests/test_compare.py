"""Tests for the comparison stage (figkit.compare).

External references used:
* RMS difference: matplotlib's testing module, ``matplotlib.testing.compare.calculate_rms``
  (``compare_images`` hands it int16 copies of 8-bit images);
* SSIM: Wang, Bovik, Sheikh & Simoncelli (2004), IEEE TIP 13(4):600-612; reference
  implementation scikit-image ``skimage.metrics.structural_similarity`` with
  ``gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range=255``, which the
  scikit-image documentation states matches the paper; test image ``skimage.data.camera()``
  (the 512 x 512 "cameraman" image shipped with scikit-image);
* BT.601 luma: Pillow's ``Image.convert("L")`` (documented as L = R 299/1000 + G 587/1000 +
  B 114/1000, rounded to integers);
* Okabe & Ito (2008) vermillion #D55E00 and blue #0072B2 for the highlight colours (from memory).
Relative changes expected from compare_sidecars are hand arithmetic on the values in the test.
"""
from __future__ import annotations

import copy
import io
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from figkit import compare as C
from figkit.errors import FigkitError

skimage = pytest.importorskip("skimage")
from matplotlib.testing.compare import calculate_rms  # noqa: E402
from skimage.metrics import structural_similarity  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def reference_ssim(a, b, full=False):
    return structural_similarity(np.asarray(a, float), np.asarray(b, float), gaussian_weights=True,
                                 sigma=1.5, use_sample_covariance=False, data_range=255, full=full)


# ----------------------------------------------------------------------------- RMS

@pytest.mark.parametrize("shape", [(37, 53), (40, 61, 3), (29, 31, 4)])
def test_rms_matches_matplotlib_on_random_8bit_images(shape):
    rng = np.random.default_rng(sum(shape))
    a = rng.integers(0, 256, shape, dtype=np.uint8)
    b = rng.integers(0, 256, shape, dtype=np.uint8)
    ref = calculate_rms(a.astype(np.int16), b.astype(np.int16))   # as compare_images does
    assert C.rms_difference(a, b) == pytest.approx(ref, rel=1e-12)
    # the uint8 arrays themselves must not wrap round (calculate_rms on raw uint8 would)
    assert C.rms_difference(a, b) != pytest.approx(calculate_rms(a, b), rel=1e-3)


def test_rms_matches_matplotlib_on_float_images_and_sparse_changes():
    rng = np.random.default_rng(7)
    a = rng.uniform(0, 255, (64, 48, 3))
    b = a.copy()
    b[10:14, 5:9] += rng.normal(0, 40, (4, 4, 3))
    assert C.rms_difference(a, b) == pytest.approx(calculate_rms(a, b), rel=1e-12)
    assert C.rms_difference(a, b) > 0


def test_rms_of_image_files_equals_that_of_their_pixels(tmp_path):
    rng = np.random.default_rng(3)
    a = rng.integers(0, 256, (30, 40, 3), dtype=np.uint8)
    b = rng.integers(0, 256, (30, 40, 3), dtype=np.uint8)
    Image.fromarray(a).save(tmp_path / "a.png")
    Image.fromarray(b).save(tmp_path / "b.png")
    ref = calculate_rms(a.astype(np.int16), b.astype(np.int16))
    assert C.rms_difference(tmp_path / "a.png", tmp_path / "b.png") == pytest.approx(ref, rel=1e-12)


def test_identical_images_have_rms_zero_and_ssim_one():
    cam = skimage.data.camera()
    assert C.rms_difference(cam, cam.copy()) == 0.0
    assert C.ssim(cam, cam.copy()) == pytest.approx(1.0, abs=1e-12)
    assert reference_ssim(cam, cam) == pytest.approx(1.0, abs=1e-12)


def test_images_of_different_size_are_a_one_line_error():
    with pytest.raises(FigkitError, match="differ in size") as exc:
        C.rms_difference(np.zeros((10, 12)), np.zeros((12, 10)))
    assert "\n" not in str(exc.value)
    with pytest.raises(FigkitError, match="differ in size"):
        C.ssim(np.zeros((20, 22)), np.zeros((22, 20)))
    with pytest.raises(FigkitError, match="at least 11 x 11"):
        C.ssim(np.zeros((10, 30)), np.zeros((10, 30)))


# ----------------------------------------------------------------------------- SSIM

def _distortions():
    from scipy import ndimage
    cam = skimage.data.camera()
    rng = np.random.default_rng(2004)
    noisy = np.clip(cam + rng.normal(0, 10, cam.shape), 0, 255).astype(np.uint8)
    blurred = np.clip(ndimage.gaussian_filter(cam.astype(float), 2.0), 0, 255).round().astype(np.uint8)
    shifted = np.roll(cam, (3, -2), axis=(0, 1))
    brighter = np.clip(cam.astype(int) + 25, 0, 255).astype(np.uint8)      # mean shift
    buf = io.BytesIO()
    Image.fromarray(cam).save(buf, format="JPEG", quality=10)
    jpeg = np.asarray(Image.open(buf).convert("L"))
    return cam, {"noise": noisy, "blur": blurred, "shift": shifted, "mean shift": brighter,
                 "jpeg": jpeg}


CAM, DISTORTED = _distortions()


@pytest.mark.parametrize("name", sorted(DISTORTED))
def test_ssim_matches_scikit_image_on_camera(name):
    d = DISTORTED[name]
    ref = reference_ssim(CAM, d)
    got = C.ssim(CAM, d)
    assert got == pytest.approx(ref, abs=1e-4)
    assert got < 0.999          # every distortion is seen
    assert C.ssim(d, CAM) == pytest.approx(got, abs=1e-12)   # SSIM is symmetric (paper, eq. 12)


def test_ssim_map_matches_scikit_image_map():
    d = DISTORTED["noise"]
    mean, smap = C.ssim(CAM, d, return_map=True)
    ref_mean, ref_map = reference_ssim(CAM, d, full=True)
    assert smap.shape == CAM.shape
    assert np.abs(smap - ref_map).max() < 1e-4
    assert mean == pytest.approx(smap[5:-5, 5:-5].mean(), abs=1e-12)
    assert mean == pytest.approx(ref_mean, abs=1e-4)


def test_gaussian_window_is_the_papers_11_tap_window():
    from scipy import ndimage
    w = C.gaussian_window()
    assert w.size == 11 and w.sum() == pytest.approx(1.0, abs=1e-15)
    impulse = np.zeros(31)
    impulse[15] = 1.0
    ref = ndimage.gaussian_filter1d(impulse, 1.5, truncate=3.5)[10:21]   # scipy's 11-tap kernel
    assert np.allclose(w, ref, atol=1e-15)


def test_colour_images_use_bt601_luma():
    rgb = skimage.data.astronaut()[::2, ::2]          # 256 x 256 RGB
    luma = C.luminance(rgb)
    pil_l = np.asarray(Image.fromarray(rgb).convert("L"), dtype=float)
    assert np.abs(luma - pil_l).max() <= 0.51            # Pillow rounds to integers
    rng = np.random.default_rng(11)
    noisy = np.clip(rgb + rng.normal(0, 12, rgb.shape), 0, 255).astype(np.uint8)
    assert C.ssim(rgb, noisy) == pytest.approx(reference_ssim(luma, C.luminance(noisy)), abs=1e-4)


# ----------------------------------------------------------------------------- diff image

def test_diff_image_marks_added_and_removed_ink(tmp_path):
    a = np.full((40, 50, 3), 255, np.uint8)
    b = a.copy()
    a[10:20, 10:20] = 0          # old square
    b[10:20, 30:40] = 0          # moved to the right
    out = C.diff_image(a, b, tmp_path / "d.png", grow=0)
    assert [p.name for p in tmp_path.iterdir()] == ["d.png"]     # no temporary file left
    d = np.asarray(Image.open(out).convert("RGB"))
    assert d.shape == a.shape
    assert (d[10:20, 30:40] == (0xD5, 0x5E, 0x00)).all()      # ink added: vermillion
    assert (d[10:20, 10:20] == (0x00, 0x72, 0xB2)).all()      # ink removed: blue
    rest = np.ones((40, 50), bool)
    rest[10:20, 10:20] = rest[10:20, 30:40] = False
    assert (d[rest] == 255).all()                              # white paper stays white
    grown = np.asarray(Image.open(C.diff_image(a, b, tmp_path / "g.png", grow=2)).convert("RGB"))
    assert (grown[8:22, 28:42] == (0xD5, 0x5E, 0x00)).all()
    with pytest.raises(FigkitError, match="differ in size"):
        C.diff_image(a, b[:30], tmp_path / "x.png")


# ----------------------------------------------------------------------------- sidecars

def _sidecar(**over):
    sc = {
        "id": "growth", "size_mm": [84.0, 110.8], "dpi": 600,
        "files": {"png": "growth.png"},
        "inputs": [{"path": "data/obs.csv", "sha256": "a" * 64}],
        "chart": "scatter", "x": "dose", "y": "growth", "filter": None, "derived": None,
        "layout": {"rows": 1, "cols": 2, "panels": 2, "panel_mm": [38.0, 28.5]},
        "panels": [
            {"label": "north", "keys": {"site": "north"}, "n": 30, "n_dropped": 0,
             "stats": {"n": 30, "n_dropped": 0, "slope": 0.5, "slope_ci_low": 0.3,
                       "slope_ci_high": 0.7, "r": 0.8, "x_mean": 5.0, "y_mean": 4.5}},
            {"label": "south", "keys": {"site": "south"}, "n": 30, "n_dropped": 2,
             "stats": {"n": 30, "n_dropped": 2, "slope": 2.0, "slope_ci_low": 1.5,
                       "slope_ci_high": 2.5, "r": 0.9, "x_mean": 5.0, "y_mean": 12.0}}],
        "colours": {"used": ["#E69F00"], "min_delta_e": {}},
        "min_font_pt": 6.0, "strata_test": {"F": 4.0, "df_num": 1, "df_den": 56, "p": 0.04},
        "versions": {"figkit": "0.1.0", "numpy": "2.4.6"},
        "row_sha256": "b" * 64, "cautions": [],
    }
    sc.update(over)
    return sc


def test_compare_sidecars_reports_panel_n_and_slope():
    old = _sidecar()
    new = copy.deepcopy(old)
    south = new["panels"][1]
    south["n"] = south["stats"]["n"] = 40
    south["stats"]["slope"] = 2.5
    changes = C.compare_sidecars(old, new)
    by_what = {c.what: c for c in changes}
    assert set(by_what) == {"panel 'south' n", "panel 'south' slope"}
    n = by_what["panel 'south' n"]
    assert (n.figure, n.old, n.new) == ("growth", 30, 40)
    assert "+10 rows" in n.note and "+33.3%" in n.note            # 10 / 30 (hand arithmetic)
    s = by_what["panel 'south' slope"]
    assert (s.old, s.new, s.note) == (2.0, 2.5, "+25%")          # 0.5 / 2.0
    assert s.text == "growth: panel 'south' slope: 2 -> 2.5 (+25%)"
    assert all("\n" not in c.text for c in changes)
    assert C.compare_sidecars(old, copy.deepcopy(old)) == []


def test_compare_sidecars_covers_the_other_fields():
    old = _sidecar()
    new = copy.deepcopy(old)
    new["size_mm"] = [84.0, 140.3]
    new["layout"].update(rows=2, panels=3)
    new["panels"][0]["stats"].update(slope_ci_low=-0.1, slope=-0.2)   # CI now covers 0, sign flips
    new["panels"] = [new["panels"][0], {"label": "east", "n": 12, "n_dropped": 0, "stats": None}]
    new["strata_test"] = {"F": 2.0, "df_num": 2, "df_den": 70, "p": 0.14}
    new["inputs"] = [{"path": "data/obs.csv", "sha256": "c" * 64},
                     {"path": "data/extra.csv", "sha256": "d" * 64}]
    new["colours"]["used"] = ["#E69F00", "#56B4E9"]
    new["cautions"] = ["points drawn at the lowest opacity"]
    new["versions"]["numpy"] = "2.5.0"
    by_what = {c.what: c for c in C.compare_sidecars(old, new)}
    assert "height +29.5 mm" in by_what["size_mm"].note
    assert by_what["layout rows"].new == 2 and by_what["layout panels"].new == 3
    assert by_what["panel removed"].old == "south" and by_what["panel added"].new == "east"
    assert "sign changed" in by_what["panel 'north' slope"].note
    assert by_what["panel 'north' slope CI"].note.startswith("now includes 0")   # no trend in this sidecar
    assert "no trend drawn" in by_what["panel 'north' slope CI"].note
    assert by_what["strata test F"].note == "-50%"               # 2 against 4
    assert by_what["strata test p"].note == "now at or above 0.05"
    assert by_what["input data/obs.csv"].new == "c" * 12
    assert by_what["input added"].new == "data/extra.csv"
    assert by_what["colours newly used"].new == ["#56B4E9"]
    assert by_what["caution added"].new == "points drawn at the lowest opacity"
    assert (by_what["version of numpy"].old, by_what["version of numpy"].new) == ("2.4.6", "2.5.0")
    with pytest.raises(FigkitError, match="must be a mapping"):
        C.compare_sidecars(old, [1, 2])


# ----------------------------------------------------------------------------- folders

CONFIG = """\
sheet: config/figures.tsv
results: results
style: house
formats: [png]
dpi: 300
datasets:
  obs: data/obs.csv
  ref: data/ref.csv
"""
HEADER = ["id", "dataset", "chart", "x", "y", "strata", "trend", "size", "height_mm"]
ROWS = {
    "growth": ["growth", "obs", "scatter", "dose", "growth", "site", "line", "single", "100"],
    "steady": ["steady", "ref", "histogram", "depth", "", "site", "", "single", ""],
    "gone": ["gone", "obs", "histogram", "dose", "", "", "", "single", ""],
    "extra": ["extra", "obs", "histogram", "growth", "", "", "", "single", ""],
}


def _project(root: Path, ids: list[str], south_slope: float, south_n: int) -> Path:
    """A tiny synthetic project: two sites, a dose-growth line per site, and a reference table.
    'growth' has a fixed height so that its renders keep their pixel size when the data change."""
    import pandas as pd
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    (root / "styles").symlink_to(ROOT / "figkit" / "styles")
    (root / "config" / "config.yaml").write_text(CONFIG, encoding="utf-8")
    lines = ["\t".join(HEADER)] + ["\t".join(ROWS[i]) for i in ids]
    (root / "config" / "figures.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    rng = np.random.default_rng(42)
    dose_n = rng.uniform(0, 10, 30)
    dose_s = rng.uniform(0, 10, 60)[:south_n]
    noise_n, noise_s = rng.normal(0, 0.4, 30), rng.normal(0, 0.4, 60)[:south_n]
    obs = pd.DataFrame({"site": ["north"] * 30 + ["south"] * south_n,
                        "dose": np.r_[dose_n, dose_s],
                        "growth": np.r_[2 + 0.5 * dose_n + noise_n, 2 + south_slope * dose_s + noise_s]})
    obs.round(4).to_csv(root / "data" / "obs.csv", index=False)
    ref_rng = np.random.default_rng(5)
    ref = pd.DataFrame({"site": np.repeat(["north", "south"], 40), "depth": ref_rng.gamma(2, 3, 80)})
    ref.round(3).to_csv(root / "data" / "ref.csv", index=False)
    from figkit.render import load_project, render
    project = load_project(root)
    for i in ids:
        render(project, i)
    return root / "results" / "figures"


@pytest.fixture(scope="module")
def builds(tmp_path_factory):
    base = tmp_path_factory.mktemp("compare")
    old = _project(base / "old", ["growth", "steady", "gone"], south_slope=0.3, south_n=30)
    new = _project(base / "new", ["growth", "steady", "extra"], south_slope=0.6, south_n=40)
    return old, new


def _reduced(path, factor=2):
    """A render box-filtered by a whole factor with Pillow's ``Image.reduce`` (the reference for
    the comparison resolution: the test projects draw at 300 dpi, compared at 150)."""
    with Image.open(path) as im:
        return np.asarray(im.convert("RGB").reduce(factor))


def test_compare_folders_end_to_end(builds, tmp_path):
    old, new = builds
    out = tmp_path / "cmp"
    report = C.compare_folders(old, new, out)
    assert report.added == ["extra"] and report.removed == ["gone"]
    assert [f.id for f in report.unchanged] == ["steady"]
    (growth,) = report.changed
    assert growth.id == "growth" and growth.pixels == "differ"
    # n 30 -> 40 is +33 %, past the 10 % that changes a conclusion: listed first, as a conclusion
    concl = {c.what: c for c in growth.conclusions}
    assert (concl["panel 'south' n"].old, concl["panel 'south' n"].new) == (30, 40)
    assert concl["panel 'south' n"].level == "conclusion"
    whats = {c.what: c for c in growth.changes}
    assert "panel 'south' slope" in whats and "panel 'north' slope" not in whats
    assert whats["panel 'south' slope"].new > whats["panel 'south' slope"].old
    assert whats["input data/obs.csv"].level == "provenance"
    assert growth.rms > 0 and 0 < growth.ssim < 1
    # the pixel numbers are those of the files on disk reduced to 150 dpi, by the references
    a, b = _reduced(old / "growth.png"), _reduced(new / "growth.png")
    assert growth.rms == pytest.approx(calculate_rms(a.astype(np.int16), b.astype(np.int16)))
    assert growth.ssim == pytest.approx(reference_ssim(C.luminance(a), C.luminance(b)), abs=1e-4)
    md = (out / "changes.md").read_text(encoding="utf-8")
    assert "## growth" in md and "panel 'south' n: 30 -> 40" in md
    assert md.index("Changes a reader's conclusion") < md.index("panel 'south' slope")
    assert "Unchanged: steady." in md and "## steady" not in md
    assert "## Figures added" in md and "- extra" in md and "- gone" in md
    assert growth.diff_png == out / "growth.diff.png" and "growth.diff.png" in md
    diff = np.asarray(Image.open(growth.diff_png).convert("RGB"))
    assert diff.shape == a.shape
    assert (diff == (0xD5, 0x5E, 0x00)).all(axis=2).any()      # some ink marked as added
    assert sorted(p.name for p in out.iterdir()) == ["changes.md", "growth.diff.png"]


def test_tolerance_and_same_folder(builds):
    old, new = builds
    same = C.compare_folders(old, old)
    assert same.changed == [] and same.added == [] and same.removed == []
    assert same.markdown_path is None
    loose = C.compare_folders(old, new, tolerance=255.0)
    (growth,) = loose.changed          # still changed: its sidecar differs
    assert growth.pixels == "within tolerance" and growth.diff_png is None


def test_renders_of_different_size_are_still_compared(builds, tmp_path):
    """A render 10 px wider at 300 dpi (0.85 mm) is compared on a common canvas at 150 dpi and
    the size change reported (it used to be "not compared")."""
    old, _ = builds
    bigger = tmp_path / "bigger"
    shutil.copytree(old, bigger)
    with Image.open(old / "steady.png") as im:
        wide = Image.new("RGBA", (im.width + 10, im.height), (255, 255, 255, 255))
        wide.paste(im, (0, 0))
        wide.save(bigger / "steady.png", dpi=(300, 300))
    report = C.compare_folders(old, bigger, tmp_path / "out")
    (steady,) = report.changed
    assert steady.size_change == "width +0.8 mm"          # 10 px / 300 dpi * 25.4 = 0.847 mm
    # same drawing, white strip added: compared, and the pixels on the common canvas are equal
    assert steady.rms == 0.0 and steady.ssim == pytest.approx(1.0)
    assert "size changed: width +0.8 mm" in steady.pixel_text()
    with Image.open(old / "steady.png") as im:
        smaller = im.crop((0, 0, im.width, im.height - 40))
        smaller.save(bigger / "steady.png", dpi=(300, 300))
    (steady,) = C.compare_folders(old, bigger).changed
    assert steady.size_change == "height -3.4 mm" and steady.rms > 0 and steady.ssim < 1


def test_cli_compare_prints_summary_and_exits_0(builds, tmp_path, capsys):
    from figkit.cli import main
    old, new = builds
    assert main(["compare", str(old), str(new), "--out", str(tmp_path / "o")]) == 0
    text = capsys.readouterr().out
    assert ("figkit: compare: 2 figures in both: 1 changed (1 with a changed conclusion), "
            "1 unchanged; 1 added, 1 removed") in text
    assert "CONCLUSION panel 'south' n: 30 -> 40" in text and (tmp_path / "o" / "changes.md").is_file()
    # results folder (holding figures/) is accepted too
    assert main(["compare", str(old.parent), str(new.parent)]) == 0
    assert "1 changed" in capsys.readouterr().out


def test_cli_compare_bad_folder_is_one_line_error(builds, tmp_path, capsys):
    from figkit.cli import main
    old, _ = builds
    assert main(["compare", str(old), str(tmp_path / "nowhere")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("figkit: error:") and "no snapshot or folder" in err and "\n" not in err
    (tmp_path / "empty").mkdir()
    (tmp_path / "empty2").mkdir()
    assert main(["compare", str(tmp_path / "empty"), str(tmp_path / "empty2")]) == 2
    assert "no figure sidecars" in capsys.readouterr().err
    assert main(["compare", str(old), str(old), "--tolerance", "-1"]) == 2
    assert "tolerance" in capsys.readouterr().err


def test_broken_sidecar_is_named(builds, tmp_path):
    old, _ = builds
    broken = tmp_path / "broken"
    shutil.copytree(old, broken)
    (broken / "growth.json").write_text("{not json", encoding="utf-8")
    with pytest.raises(FigkitError, match="growth.json"):
        C.compare_folders(old, broken)
    (broken / "growth.json").write_text(json.dumps({"note": "not a sidecar"}), encoding="utf-8")
    report = C.compare_folders(old, broken)
    assert report.removed == ["growth"]


def test_compare_sidecars_describes_changed_bin_edges():
    """Histogram bars covering other ranges are a change a reader sees: old and new edges are
    described as bin count, width and range (hand arithmetic on the edges below)."""
    old = _sidecar()
    old["bin_edges"] = [float(e) for e in np.linspace(0, 150, 13)]       # 12 bins of 12.5
    new = copy.deepcopy(old)
    new["bin_edges"] = [float(e) for e in np.linspace(0, 400, 11)]       # 10 bins of 40
    (c,) = C.compare_sidecars(old, new)
    assert c.what == "bin edges"
    assert c.old == "12 bins of 12.5 from 0 to 150" and c.new == "10 bins of 40 from 0 to 400"
    assert C.compare_sidecars(old, copy.deepcopy(old)) == []


def test_compare_sidecars_bin_edges_moved_a_little_and_many_tiles():
    """Edges moved by 0.0002 read alike at six digits: the change still says by how much; more than
    eight changed tiles give the eight largest and one line counting the rest (hand arithmetic)."""
    old = _sidecar()
    old["bin_edges"] = [1000.1 + 12.5 * i for i in range(13)]
    new = copy.deepcopy(old)
    new["bin_edges"] = [1000.1002 + 12.5 * i for i in range(13)]
    (c,) = C.compare_sidecars(old, new)
    assert c.what == "bin edges" and c.old == c.new and "moved by up to 0.0002" in c.note
    old = _sidecar()
    old["panels"][0]["tiles"] = [{"x": f"c{i}", "y": "r", "count": 10} for i in range(12)]
    new = copy.deepcopy(old)
    for i, t in enumerate(new["panels"][0]["tiles"]):
        t["count"] = 10 + i + 1                     # every tile changes; c11 the most (+12)
    label = old["panels"][0]["label"]
    changes = C.compare_sidecars(old, new)
    tiles = [c for c in changes if c.what.startswith(f"panel '{label}' tile ")]
    assert [c.what.split()[-3] for c in tiles] == [f"c{i}" for i in range(11, 3, -1)]   # "c11 / r"
    (more,) = [c for c in changes if c.what == f"panel '{label}' tiles"]
    assert more.new == "4 more changed"


def test_overlay_shows_old_and_new_ink_in_two_colours_and_hue_changes():
    """Black ink only in the old render -> Okabe & Ito blue #0072B2; only in the new -> vermillion
    #D55E00; in both -> near black; white stays white (multiply blend, hand arithmetic).  Two
    fills of equal BT.601 luma (grey 128 and a colour of luma 128) -> reddish purple #CC79A7."""
    a = np.full((20, 30, 3), 255, np.uint8)
    b = a.copy()
    a[2:6, 2:6] = 0
    b[2:6, 10:14] = 0
    a[10:14, 2:6] = 0
    b[10:14, 2:6] = 0
    a[15:19, 20:25] = 128
    b[15:19, 20:25] = (200, 100, 59)          # 0.299*200 + 0.587*100 + 0.114*59 = 125.2
    out = C.overlay_image(a, b)
    assert (out[2:6, 2:6] == (0x00, 0x72, 0xB2)).all()
    assert (out[2:6, 10:14] == (0xD5, 0x5E, 0x00)).all()
    assert (out[10:14, 2:6].astype(int).max() <= round(255 * 0.447 * 0.369) + 1)   # dark
    assert (out[0, :] == 255).all()
    assert (out[15:19, 20:25] == (0xCC, 0x79, 0xA7)).all()
    # renders of different size: laid top-left on a common white canvas
    wide = np.full((20, 40, 3), 255, np.uint8)
    assert C.overlay_image(a, wide).shape == (20, 40, 3)
