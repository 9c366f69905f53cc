"""equiscan.read, equiscan.write and equiscan.align against the CLI (`info --json`,
`align --json`) on the shipped demo scans (scans/README.md; synthetic, true transforms in
scans/truth.json)."""

import json

import numpy as np
import pytest

import equiscan
from conftest import SCANS


def test_read_gives_the_clis_info_and_the_points(cli, station1):
    scan = equiscan.read(station1)
    info = json.loads(cli("info", station1, "--json").stdout.splitlines()[0])
    assert scan.info["point_count"] == info["point_count"] == len(scan)
    assert scan.info["format"] == info["format"] == "LAZ"
    assert scan.info["crs"] == info["crs"]
    assert sorted(scan.attributes) == sorted(scan.info["attributes"])
    assert scan.points.dtype == np.float64 and scan.points.shape == (len(scan), 3)
    assert scan.local.dtype == np.float32
    np.testing.assert_array_equal(
        scan.points, np.asarray(scan.origin) + scan.local.astype(np.float64)
    )
    lo, hi = scan.info["header_bounds"]["min"], scan.info["header_bounds"]["max"]
    # Header bounds are the extremes of the stored points (LAS 1.4, section 2.4).
    np.testing.assert_allclose(scan.points.min(0), lo, atol=1e-6)
    np.testing.assert_allclose(scan.points.max(0), hi, atol=1e-6)
    for name, values in scan.attributes.items():
        assert len(values) == len(scan), name


@pytest.mark.parametrize("ext", ["ply", "las", "laz"])
def test_write_then_read_keeps_points_and_attributes(tmp_path, station1, ext):
    scan = equiscan.read(station1)
    keep = slice(0, 5000)
    part = equiscan.Scan(
        points=scan.points[keep],
        local=scan.local[keep],
        origin=scan.origin,
        attributes={k: v[keep] for k, v in scan.attributes.items()},
        info={"path": None},
    )
    out = tmp_path / f"part.{ext}"
    equiscan.write(out, part)
    back = equiscan.read(out)
    # LAS stores coordinates as integers of the scale (0.001 by default here): within half
    # a step; PLY stores the f32 offsets and the origin, so they come back as they were.
    tol = 0 if ext == "ply" else 0.0005 + 1e-9
    np.testing.assert_allclose(back.points, part.points, rtol=0, atol=tol)
    for name in ("intensity", "classification", "return_number"):
        if name in part.attributes:
            np.testing.assert_array_equal(back.attributes[name], part.attributes[name])


def test_write_refuses_unknown_names_and_formats(tmp_path):
    pts = np.random.default_rng(2).random((10, 3))
    with pytest.raises(equiscan.RecipeError, match="end the name in .las, .laz or .ply"):
        equiscan.write(tmp_path / "x.xyz", pts)
    with pytest.raises(equiscan.RecipeError, match="'colour' is not an attribute"):
        equiscan.write(tmp_path / "x.ply", pts, attributes={"colour": np.zeros((10, 3))})
    with pytest.raises(equiscan.RecipeError, match="attribute intensity has 3 entries for 10"):
        equiscan.write(tmp_path / "x.ply", pts, attributes={"intensity": np.zeros(3)})
    assert list(tmp_path.iterdir()) == []


def test_read_errors_name_the_file_and_kind(tmp_path):
    missing = tmp_path / "missing.laz"
    with pytest.raises(equiscan.IoError) as e:
        equiscan.read(missing)
    assert e.value.kind == "io" and e.value.path == str(missing)
    assert str(e.value) == f"{missing}: no such file or folder; check the path"
    assert isinstance(e.value, OSError)
    cut = tmp_path / "cut.laz"
    cut.write_bytes((SCANS / "depot_station1.laz").read_bytes()[:4000])
    with pytest.raises(equiscan.InputError) as e:
        equiscan.read(cut)
    assert e.value.kind == "input" and str(e.value).startswith(f"{cut}: ")
    assert "\n" not in str(e.value)
    text = tmp_path / "notes.txt"
    text.write_text("hello\n")
    with pytest.raises(equiscan.InputError, match="not a LAS, LAZ, PLY or E57 file"):
        equiscan.read(text)


def test_align_report_is_the_clis(cli, truth, monkeypatch):
    # SOURCE_DATE_EPOCH fixes the report's time and leaves out timings, so two runs of the
    # same registration give the same report (README, align).
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "946684800")
    source = SCANS / "parts" / "reference" / "elbow.ply"
    target = SCANS / "parts" / "tray" / "elbow_scan.ply"
    done = cli(
        "align", source, target, "--json", "--truth", truth, "--truth-key", "parts.3.pose",
        check=False,
    )
    assert done.returncode in (0, 1), done.stderr
    expected = json.loads(done.stdout)
    report = equiscan.align(source, target, truth=truth, truth_key="parts.3.pose")
    assert report == expected
    assert report["verdict"] in ("confident", "ambiguous", "not_found")
    assert (report["verdict"] == "confident") == (done.returncode == 0)
    assert set(report["truth"]) >= {"rotation_error_deg", "translation_error"}


def test_align_errors(tmp_path):
    part = SCANS / "parts" / "tray" / "elbow_scan.ply"
    with pytest.raises(equiscan.RecipeError, match='method="equivariant"'):
        equiscan.align(part, part, method="icp")
    with pytest.raises(equiscan.RecipeError, match="voxel=-1"):
        equiscan.align(part, part, voxel=-1)
    with pytest.raises(equiscan.IoError):
        equiscan.align(tmp_path / "none.ply", part)
    with pytest.raises(equiscan.RecipeError, match="expected a file path"):
        equiscan.align(np.zeros((3, 3)), part)
