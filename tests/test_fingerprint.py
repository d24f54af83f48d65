"""Fingerprints of input datasets (corridor.io.fingerprint).

References: the ESRI Shapefile Technical Description (July 1998) — a
shapefile is a main file (.shp), an index (.shx) and a dBASE table (.dbf)
sharing one name, with optional sidecars (.prj, .cpg, spatial indexes .sbn
.sbx .qix); SQLite "Write-Ahead Logging" (https://www.sqlite.org/wal.html) —
in WAL mode committed changes live in ``<db>-wal`` until a checkpoint;
SHA-256 is FIPS 180-4, computed independently here with ``hashlib``.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3

import pytest

from corridor.io.fingerprint import dataset_files, dataset_sha256


def _shapefile(folder, stem="roads"):
    for ext in (".shp", ".shx", ".dbf", ".prj", ".cpg", ".QIX", ".sbn", ".sbx"):
        (folder / f"{stem}{ext}").write_bytes(f"{stem}{ext}".encode())


def test_shapefile_lists_every_sidecar_case_insensitively(tmp_path):
    _shapefile(tmp_path)
    (tmp_path / "ROADS.DBF.bak").write_bytes(b"other")  # stem ROADS.DBF: another dataset
    (tmp_path / "roads_old.dbf").write_bytes(b"other")
    (tmp_path / "rivers.shp").write_bytes(b"other")
    names = [p.name for p in dataset_files(tmp_path / "roads.shp")]
    assert names[0] == "roads.shp"
    assert sorted(names) == sorted(["roads.shp", "roads.shx", "roads.dbf", "roads.prj",
                                    "roads.cpg", "roads.QIX", "roads.sbn", "roads.sbx"])


def test_shapefile_digest_sees_a_dbf_edit(tmp_path):
    _shapefile(tmp_path)
    before = dataset_sha256(tmp_path / "roads.shp")
    (tmp_path / "roads.dbf").write_bytes(b"edited attributes")
    assert dataset_sha256(tmp_path / "roads.shp") != before
    # and a new sidecar (a spatial index built later) is a change of the dataset too
    after = dataset_sha256(tmp_path / "roads.shp")
    (tmp_path / "roads.fix").write_bytes(b"x")
    assert dataset_sha256(tmp_path / "roads.shp") != after


def test_single_file_digest_is_its_sha256(tmp_path):
    """A dataset of one file hashes as the file itself (sha256sum gives the same)."""
    p = tmp_path / "lines.geojson"
    p.write_bytes(b'{"type": "FeatureCollection", "features": []}')
    assert dataset_files(p) == [p]
    assert dataset_sha256(p) == hashlib.sha256(p.read_bytes()).hexdigest()


def test_geopackage_digest_sees_a_change_held_in_the_wal(tmp_path):
    db = tmp_path / "layers.gpkg"
    con = sqlite3.connect(db)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("CREATE TABLE t (id INTEGER PRIMARY KEY, v REAL)")
    con.execute("INSERT INTO t (v) VALUES (1.0)")
    con.commit()
    con.close()  # the last connection: checkpointed, -wal removed
    assert dataset_files(db) == [db]
    before_main = hashlib.sha256(db.read_bytes()).hexdigest()
    before = dataset_sha256(db)
    con = sqlite3.connect(db)
    try:
        con.execute("UPDATE t SET v = 2.0")
        con.commit()
        names = {p.name for p in dataset_files(db)}
        assert {"layers.gpkg", "layers.gpkg-wal"} <= names
        # the main file has not changed yet (the edit is in the -wal file)
        assert hashlib.sha256(db.read_bytes()).hexdigest() == before_main
        assert dataset_sha256(db) != before
    finally:
        con.close()


def test_shm_file_does_not_enter_the_digest(tmp_path):
    """The -shm file is an index readers write into; it holds no data. Nor does a -wal
    file of 0 bytes (no frames), which a reader may leave behind."""
    db = tmp_path / "a.sqlite"
    db.write_bytes(b"main")
    alone = dataset_sha256(db)
    (tmp_path / "a.sqlite-wal").write_bytes(b"")
    assert dataset_sha256(db) == alone
    (tmp_path / "a.sqlite-wal").write_bytes(b"frames")
    before = dataset_sha256(db)
    (tmp_path / "a.sqlite-shm").write_bytes(b"read marks 1")
    assert tmp_path / "a.sqlite-shm" in dataset_files(db)
    assert dataset_sha256(db) == before


def test_folder_dataset_lists_every_file_sorted_and_sees_an_edit(tmp_path):
    gdb = tmp_path / "network.gdb"
    (gdb / "sub").mkdir(parents=True)
    for name in ("b.gdbtable", "a00000001.gdbtable", "gdb", "sub/c.txt"):
        (gdb / name).write_bytes(name.encode())
    files = dataset_files(gdb)
    assert [p.relative_to(gdb).as_posix() for p in files] == [
        "a00000001.gdbtable", "b.gdbtable", "gdb", "sub/c.txt"]
    before = dataset_sha256(gdb)
    (gdb / "sub" / "c.txt").write_bytes(b"edited")
    assert dataset_sha256(gdb) != before
    edited = dataset_sha256(gdb)
    (gdb / "sub" / "c.txt").rename(gdb / "sub" / "d.txt")  # same bytes, other name
    assert dataset_sha256(gdb) != edited


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="POSIX FIFOs")
def test_special_files_are_never_opened(tmp_path):
    """Opening a FIFO for reading blocks until a writer comes: it is hashed by kind only."""
    fifo = tmp_path / "layer.gpkg"
    os.mkfifo(fifo)
    assert len(dataset_sha256(fifo)) == 64
    folder = tmp_path / "f"
    folder.mkdir()
    os.mkfifo(folder / "pipe")
    assert len(dataset_sha256(folder)) == 64


def test_missing_dataset_hashes_without_error(tmp_path):
    assert dataset_files(tmp_path / "nope.shp") == [tmp_path / "nope.shp"]
    missing = dataset_sha256(tmp_path / "nope.shp")
    (tmp_path / "nope.shp").write_bytes(b"")
    assert missing != dataset_sha256(tmp_path / "nope.shp")  # an empty file is not absent
