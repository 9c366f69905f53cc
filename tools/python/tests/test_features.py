"""equiscan.features against the CLI's `features` output files (NPY + JSON sidecar).

Reference: the CLI binary of the same checkout, whose NPY writer follows the NumPy format
specification (NEP 1, ``.npy`` version 1.0; numpy's own ``np.load`` reads it here).
"""

import json
import sys
import threading

import numpy as np
import pytest

import equiscan
from conftest import SCANS

PART = SCANS / "parts" / "tray" / "elbow_scan.ply"


def cli_features(cli, tmp_path, src, *args, name="cli.npy"):
    out = tmp_path / name
    cli("features", src, "-o", out, "-q", *args)
    with open(str(out) + ".json") as f:
        side = json.load(f)
    return np.load(out), side


def test_same_bytes_and_columns_as_the_cli(cli, tmp_path):
    ref, side = cli_features(cli, tmp_path, PART, "--radius", "2.5")
    scan = equiscan.read(PART)
    values, columns = equiscan.features(scan, radius=2.5)
    assert columns == side["columns"]
    assert values.dtype == np.float32 and values.shape == ref.shape
    assert values.tobytes() == ref.tobytes()
    assert list(scan.origin) == side["metadata"]["origin"]


def test_every_option_matches_the_cli(cli, tmp_path):
    args = [
        "--radius", "2,4", "--degree", "3", "--shells", "4", "--max-neighbours", "40",
        "--invariants", "norms,power,bispectrum", "--keep-coefficients", "--voxel", "1.5",
        "--descriptor-version", "1",
    ]
    ref, side = cli_features(cli, tmp_path, PART, *args)
    values, columns = equiscan.features(
        equiscan.read(PART),
        radius=[2, 4],
        degree=3,
        shells=4,
        max_neighbours=40,
        invariants="norms,power,bispectrum",
        keep_coefficients=True,
        voxel=1.5,
        descriptor_version=1,
        threads=1,
    )
    assert columns == side["columns"]
    assert values.tobytes() == ref.tobytes()


def test_suggested_radius_is_the_clis(cli, tmp_path):
    ref, side = cli_features(cli, tmp_path, PART)
    values, columns = equiscan.features(equiscan.read(PART))
    assert columns == side["columns"]
    assert values.tobytes() == ref.tobytes()


def test_float64_coordinates_with_the_files_origin_give_the_same_bytes(cli, tmp_path):
    ref, _ = cli_features(cli, tmp_path, PART, "--radius", "2.5")
    scan = equiscan.read(PART)
    values, _ = equiscan.features(scan.points, radius=2.5, origin=scan.origin)
    assert values.tobytes() == ref.tobytes()
    # Default origin for float64: the centre of the bounding box rounded to whole units.
    # Another f32 frame rounds differently: a neighbour at the support radius may fall in
    # or out (rare), and otherwise the values agree to 1e-4 of each column's largest value.
    values, columns = equiscan.features(scan.points, radius=2.5)
    origin = np.round((scan.points.min(0) + scan.points.max(0)) / 2)
    np.testing.assert_array_equal(values[:, :3], (scan.points - origin).astype(np.float32))
    counts = [i for i, c in enumerate(columns) if c.endswith("_count")]
    same = np.all(values[:, counts] == ref[:, counts], axis=1)
    assert same.mean() > 0.999
    scale = np.maximum(np.abs(ref[:, 3:]).max(0), 1e-30)
    assert np.all(np.abs(values[same, 3:] - ref[same, 3:]) <= 1e-4 * scale)


def test_same_bytes_whatever_the_thread_count():
    scan = equiscan.read(PART)
    one, _ = equiscan.features(scan, radius=2.5, threads=1)
    two, _ = equiscan.features(scan, radius=2.5, threads=2)
    assert one.tobytes() == two.tobytes()


def test_noncontiguous_input_is_read_by_rows():
    scan = equiscan.read(PART)
    wide = np.zeros((len(scan), 5), dtype=np.float32)
    wide[:, 1:4] = scan.local
    a, _ = equiscan.features(wide[:, 1:4], radius=2.5, origin=scan.origin)
    b, _ = equiscan.features(scan, radius=2.5)
    assert a.tobytes() == b.tobytes()


@pytest.mark.parametrize(
    "points, kwargs, error, words",
    [
        (np.zeros((5, 2)), {}, equiscan.RecipeError, "points: the array has shape [5, 2]"),
        (np.zeros((5, 3), dtype=np.int32), {}, equiscan.RecipeError, "expected a 2-D numpy array"),
        ([[0.0, 0.0, 0.0]], {}, equiscan.RecipeError, "expected a 2-D numpy array"),
        (np.zeros((0, 3)), {}, equiscan.RecipeError, "the array has no point"),
        (np.array([[0, 0, 0], [1, np.nan, 0.0]]), {}, equiscan.InputError,
         "points: row 1 has a non-finite coordinate (y = NaN)"),
        (np.random.default_rng(1).random((50, 3)), {"radius": -1}, equiscan.RecipeError, "radius"),
        (np.random.default_rng(1).random((50, 3)), {"degree": 40}, equiscan.RecipeError, "degree"),
        (np.random.default_rng(1).random((50, 3)), {"invariants": "norms,colour"},
         equiscan.RecipeError, "colour"),
        (np.random.default_rng(1).random((50, 3)), {"radius": 0.3, "threads": 0},
         equiscan.RecipeError, "threads=0"),
    ],
)
def test_bad_input_raises_one_line_errors(points, kwargs, error, words):
    with pytest.raises(error) as e:
        equiscan.features(points, **kwargs)
    text = str(e.value)
    assert words in text, text
    assert "\n" not in text and "; " in text
    assert e.value.kind == error.kind
    assert isinstance(e.value, equiscan.Error) and isinstance(e.value, ValueError)


def test_the_gil_is_released_during_the_computation():
    # With a 30 s switch interval a thread holding the GIL is not made to yield: the main
    # thread can run while the worker is inside `features` only if the call released it.
    scan = equiscan.read(PART)
    state = {"inside": False, "seen_inside": None}
    entered = threading.Event()

    def work():
        state["inside"] = True
        entered.set()
        equiscan.features(scan, radius=2.5, threads=1)
        state["inside"] = False

    old = sys.getswitchinterval()
    sys.setswitchinterval(30.0)
    try:
        t = threading.Thread(target=work)
        t.start()
        entered.wait()
        state["seen_inside"] = state["inside"]
        t.join()
    finally:
        sys.setswitchinterval(old)
    assert state["seen_inside"] is True
