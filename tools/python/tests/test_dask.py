"""equiscan.dask.extract on a LocalCluster of 2 worker processes against `equiscan batch`.

Tiles: a 3 x 3 grid cut from the demo station scans/depot_station1.laz (every 4th point, so
that the test stays short), written by equiscan.write. The CLI's files are the reference:
extract must write the same bytes, the same journal records (status, file sizes and
CRC-32), and resume from the CLI's journal and the CLI from its.
"""

import json
import shutil
import warnings

import numpy as np
import pytest

import equiscan
import equiscan.dask

distributed = pytest.importorskip("distributed")

RADIUS = 0.15
JOURNAL = "equiscan-journal"


@pytest.fixture(scope="module")
def tiles(tmp_path_factory, station1):
    folder = tmp_path_factory.mktemp("tiles")
    scan = equiscan.read(station1)
    keep = slice(None, None, 4)
    local = scan.local[keep]
    attributes = {k: v[keep] for k, v in scan.attributes.items()}
    lo, hi = local.min(0), local.max(0)
    cell = np.minimum(((local[:, :2] - lo[:2]) / (hi[:2] - lo[:2]) * 3).astype(int), 2)
    for cx in range(3):
        for cy in range(3):
            m = (cell[:, 0] == cx) & (cell[:, 1] == cy)
            equiscan.write(
                folder / f"tile_{cx}_{cy}.las",
                local[m],
                origin=scan.origin,
                attributes={k: v[m] for k, v in attributes.items()},
            )
    return folder


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    )
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def outputs(folder):
    return {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}


def records(folder):
    out = {}
    for p in (folder / JOURNAL).glob("*.json"):
        if p.name == "run.json":
            continue
        r = json.loads(p.read_text())
        out[p.name] = (r["status"], r["rows"], r["halo_points"], json.dumps(r["files"]))
    return out


def cli_batch(cli, inputs, out, *args):
    done = cli("batch", *inputs, "-o", out, "--radius", RADIUS, "--json", "-q", *args, check=False)
    assert done.returncode in (0, 1), done.stderr
    return json.loads(done.stdout), done.returncode


@pytest.mark.parametrize("fmt", ["npy", "parquet"])
def test_extract_writes_the_clis_bytes_and_journal(cli, tiles, tmp_path, client, fmt):
    ref, code = cli_batch(cli, [tiles], tmp_path / "cli", "--format", fmt)
    assert code == 0 and ref["done"] == 9
    got = equiscan.dask.extract(tiles, tmp_path / "dask", radius=RADIUS, format=fmt, client=client)
    assert got["exit_code"] == 0
    for k in ("tiles", "done", "skipped", "failed", "points", "halo_points"):
        assert got[k] == ref[k], k
    assert got["halo_points"] > 0
    mine, theirs = outputs(tmp_path / "dask"), outputs(tmp_path / "cli")
    assert sorted(mine) == sorted(theirs) and len(mine) == (18 if fmt == "npy" else 9)
    for name in theirs:
        assert mine[name] == theirs[name], name
    assert records(tmp_path / "dask") == records(tmp_path / "cli")
    assert (tmp_path / "dask" / JOURNAL / "run.json").read_bytes() == (
        tmp_path / "cli" / JOURNAL / "run.json"
    ).read_bytes()


def test_resume_after_damage_and_across_cli_and_dask(cli, tiles, tmp_path, client):
    out = tmp_path / "out"
    first = equiscan.dask.extract(tiles, out, radius=RADIUS, client=client)
    assert (first["done"], first["skipped"]) == (9, 0)
    before = outputs(out)
    # The CLI resumes from the journal extract wrote: everything is finished.
    ref, code = cli_batch(cli, [tiles], out)
    assert code == 0 and (ref["done"], ref["skipped"]) == (0, 9)
    # A damaged output (as after a crash of the disk, not of the writer) is checked and redone.
    damaged = out / "tile_1_1.npy"
    damaged.write_bytes(damaged.read_bytes()[:-100])
    with pytest.warns(equiscan.dask.BatchNote, match="tile_1_1.npy: redone"):
        again = equiscan.dask.extract(tiles, out, radius=RADIUS, client=client)
    assert (again["done"], again["skipped"], again["exit_code"]) == (1, 8, 0)
    assert outputs(out) == before
    # Another recipe into the same OUTDIR is refused before any work, unless restart=True.
    with pytest.raises(equiscan.RecipeError, match="other settings"):
        equiscan.dask.extract(tiles, out, radius=2 * RADIUS, client=client)
    redo = equiscan.dask.extract(tiles, out, radius=RADIUS, client=client, restart=True)
    assert (redo["done"], redo["skipped"]) == (9, 0)
    assert outputs(out) == before


def test_a_bad_tile_fails_alone_with_the_clis_message(cli, tiles, tmp_path, client):
    mixed = tmp_path / "mixed"
    mixed.mkdir()
    for name in ("tile_0_0.las", "tile_0_1.las"):
        shutil.copy(tiles / name, mixed / name)
    good = (tiles / "tile_1_0.las").read_bytes()
    (mixed / "tile_9_9.las").write_bytes(good[: len(good) // 2])
    ref, code = cli_batch(cli, [mixed], tmp_path / "cli")
    assert code == 1
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", equiscan.dask.BatchNote)
        got = equiscan.dask.extract(mixed, tmp_path / "dask", radius=RADIUS, client=client)
    assert (got["done"], got["failed"], got["exit_code"]) == (2, 1, 1)
    assert got["failures"] == ref["failures"]
    assert "tile_9_9.las" in got["failures"][0]["error"]
    assert "\n" not in got["failures"][0]["error"]
    assert sorted(outputs(tmp_path / "dask")) == sorted(outputs(tmp_path / "cli"))


def test_bad_arguments_raise_before_any_task(tiles, tmp_path, client):
    afile = tmp_path / "a_file"
    afile.write_text("x")
    with pytest.raises(equiscan.Error, match="is a file, not a folder"):
        equiscan.dask.extract(tiles, afile, radius=RADIUS, client=client)
    with pytest.raises(equiscan.RecipeError, match="format"):
        equiscan.dask.extract(tiles, tmp_path / "o", radius=RADIUS, format="xyz", client=client)
    with pytest.raises(equiscan.RecipeError, match="shard"):
        equiscan.dask.extract(tiles, tmp_path / "o", radius=RADIUS, shard="3/2", client=client)
    with pytest.raises(equiscan.RecipeError):
        equiscan.dask.extract(tiles, tmp_path / "o", radius=-1, client=client)


def test_shards_split_the_tiles(tiles, tmp_path, client):
    out = tmp_path / "out"
    a = equiscan.dask.extract(tiles, out, radius=RADIUS, shard="1/2", client=client)
    b = equiscan.dask.extract(tiles, out, radius=RADIUS, shard="2/2", client=client)
    assert (a["done"], b["done"]) == (5, 4)
    whole = equiscan.dask.extract(tiles, tmp_path / "whole", radius=RADIUS, client=client)
    assert outputs(out) == outputs(tmp_path / "whole") and whole["done"] == 9


def test_without_a_client_a_local_cluster_is_started_and_closed(tiles, tmp_path):
    got = equiscan.dask.extract(tiles, tmp_path / "out", radius=RADIUS, shard="5/9")
    assert (got["tiles"], got["done"], got["exit_code"]) == (1, 1, 0)
    assert sorted(outputs(tmp_path / "out")) == ["tile_1_1.npy", "tile_1_1.npy.json"]
