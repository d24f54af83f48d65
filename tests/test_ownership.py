"""corridor owns only what it wrote: the output folder, its manifest, refusals, kills.

The user's folder in these tests holds the config, the layers, the
arrangements file, a note and a subfolder with a document. The checks are
facts of the file system (SHA-256 of every user file before and after,
inode numbers, what exists) and of the run contract in the README (exit
codes 0, 2, 4; the manifest lists exactly the files corridor wrote, with
their SHA-256).
"""

from __future__ import annotations

import errno
import os
import random
import signal
import time
from pathlib import Path

import pytest

from corridor import owned
from corridor.io.outputs import sha256_file
from tests.test_overnight import cli_run, hashes, make, wait_for


def user_folder(root: Path, out: str = "out", **kw) -> Path:
    """A folder of the user's: config, layers, a note and a subfolder with a document."""
    cfg = make(root, out=out, **kw)
    (root / "notes.txt").write_text("field notes, not corridor's\n", encoding="utf-8")
    (root / "docs").mkdir(exist_ok=True)
    (root / "docs" / "permit.txt").write_text("permit 17\n", encoding="utf-8")
    return cfg


def tree(root: Path, skip: tuple[str, ...] = ()) -> dict[str, str]:
    """SHA-256 of every file under ``root`` by relative path, leaving out ``skip`` entries."""
    out = {}
    for p in sorted(root.rglob("*")):
        rel = p.relative_to(root)
        if rel.parts[0] in skip or not p.is_file():
            continue
        out[str(rel)] = sha256_file(p)
    return out


def assert_complete(out: Path) -> dict:
    """The manifest lists files that exist with exactly the recorded bytes."""
    manifest = owned.read_manifest(out)
    assert manifest is not None
    for name, rec in manifest["files"].items():
        assert sha256_file(out / name) == rec["sha256"], name
    assert not (out / owned.JOURNAL).exists()
    assert not [p for p in out.iterdir() if p.name.startswith(owned.STAGING_PREFIX)]
    return manifest


# -- refusals ---------------------------------------------------------------------

@pytest.mark.parametrize("output_dir", [".", "..", "../link"], ids=["dot", "dotdot", "symlink"])
def test_foreign_folder_is_refused_before_computing(tmp_path, cli, capsys, output_dir):
    root = tmp_path / "u"
    cfg = user_folder(root, out=output_dir)
    (tmp_path / "link").symlink_to(root, target_is_directory=True)
    before = tree(tmp_path)
    assert cli(["run", str(cfg), "-q"]) == 2
    err = capsys.readouterr().err
    target = (root / output_dir).resolve()
    assert f"output folder {target} already holds files corridor did not write" in err
    assert "nothing was computed" in err
    # a few of the folder's files are named
    assert ("notes.txt" in err and "docs/" in err and "1 more" in err) or "u/" in err
    assert tree(tmp_path) == before
    assert not (target.parent / f"{target.name}.lock").exists()
    assert not (target.parent / f"{target.name}.cache").exists()


def test_out_onto_a_folder_with_a_document_and_subfolder_is_refused(tmp_path, cli, capsys):
    cfg = make(tmp_path / "s")
    docs = tmp_path / "Documents"
    (docs / "old").mkdir(parents=True)
    (docs / "letter.odt").write_bytes(b"letter")
    (docs / "old" / "a.txt").write_text("a", encoding="utf-8")
    before = tree(tmp_path)
    assert cli(["run", str(cfg), "--out", str(docs), "-q"]) == 2
    err = capsys.readouterr().err
    assert "letter.odt" in err and "old/" in err
    assert tree(tmp_path) == before


def test_out_onto_a_file_is_refused_and_the_file_stays(tmp_path, cli, capsys):
    root = tmp_path / "u"
    cfg = user_folder(root)
    before = tree(tmp_path)
    assert cli(["run", str(cfg), "--out", str(root / "notes.txt"), "-q"]) == 2
    assert "is an existing file, not a folder" in capsys.readouterr().err
    assert tree(tmp_path) == before
    assert sorted(p.name for p in root.iterdir() if p.name.startswith(".")) == []


def test_empty_folder_is_used(tmp_path, cli):
    cfg = make(tmp_path / "s")
    (tmp_path / "s" / "out").mkdir()
    assert cli(["run", str(cfg), "-q"]) == 0
    assert_complete(tmp_path / "s" / "out")


# -- runs into a folder corridor owns ---------------------------------------------------

def test_owned_folder_beside_user_files_keeps_every_user_file(tmp_path, cli, capsys):
    root = tmp_path / "u"
    cfg = user_folder(root, run={"output_formats": ["gpkg", "fgb"]})
    user = tree(root)
    assert cli(["run", str(cfg), "-q"]) == 0
    out = root / "out"
    first = assert_complete(out)
    assert "segments.fgb" in first["files"] and "run.json" in first["files"]
    assert set(first["files"]) == {p.name for p in out.iterdir()} - {owned.MANIFEST}
    assert tree(root, skip=("out", "out.cache")) == user
    # the user adds files to corridor's folder; a changed input rewrites every output, and
    # the next config no longer asks for FlatGeobuf: corridor's .fgb files go, the user's stay
    (out / "mine.txt").write_text("keep me", encoding="utf-8")
    (out / "sub").mkdir()
    (out / "sub" / "segments.fgb").write_bytes(b"user's copy")
    (out / "old.fgb").write_bytes(b"user's layer")
    inode = out.stat().st_ino
    user_folder(root, run={"output_formats": ["gpkg"]}, post_ohm={"F2": 5.0})
    user = tree(root, skip=("out", "out.cache"))
    assert cli(["run", str(cfg), "-q"]) == 0
    second = assert_complete(out)
    assert not any(n.endswith(".fgb") for n in second["files"])
    assert not (out / "segments.fgb").exists()
    assert (out / "mine.txt").read_text(encoding="utf-8") == "keep me"
    assert (out / "sub" / "segments.fgb").read_bytes() == b"user's copy"
    assert (out / "old.fgb").read_bytes() == b"user's layer"
    assert out.stat().st_ino == inode  # the folder itself was never renamed
    assert tree(root, skip=("out", "out.cache")) == user
    # a user's file named like a new output: refused, nothing replaced
    (out / "segments.parquet").write_bytes(b"user's parquet")
    user_folder(root, run={"output_formats": ["gpkg", "parquet"]}, post_ohm={"F2": 6.0})
    outputs = hashes(out)
    capsys.readouterr()
    assert cli(["run", str(cfg), "-q"]) == 2
    err = capsys.readouterr().err
    assert "segments.parquet" in err and "not written by corridor" in err
    assert (out / "segments.parquet").read_bytes() == b"user's parquet"
    assert hashes(out) == outputs


def test_publish_renames_no_folder(tmp_path, cli, monkeypatch):
    """A mount point cannot be renamed (EBUSY): publishing must rename only files in it."""
    cfg = make(tmp_path / "s")
    out = (tmp_path / "s" / "out").resolve()
    out.mkdir()
    real_rename, real_replace = os.rename, os.replace

    def guard(fn):
        def inner(src, dst, *a, **kw):
            if Path(src).resolve() == out or Path(dst).resolve() == out:
                raise OSError(errno.EBUSY, "Device or resource busy", str(src))
            return fn(src, dst, *a, **kw)
        return inner

    monkeypatch.setattr(os, "rename", guard(real_rename))
    monkeypatch.setattr(os, "replace", guard(real_replace))
    assert cli(["run", str(cfg), "-q"]) == 0
    make(tmp_path / "s", post_ohm={"F1": 7.0})
    assert cli(["run", str(cfg), "-q"]) == 0
    assert_complete(out)


def test_folder_of_an_older_corridor_is_taken_over(tmp_path, cli, capsys):
    cfg = make(tmp_path / "s")
    assert cli(["run", str(cfg), "-q"]) == 0
    out = tmp_path / "s" / "out"
    (out / owned.MANIFEST).unlink()  # as an older corridor left it: no manifest,
    (out / "CAUTION.txt").unlink()  # and none of the files it did not write yet
    assert cli(["run", str(cfg), "-q"]) == 0
    assert_complete(out)
    (out / owned.MANIFEST).unlink()
    (out / "CAUTION.txt").unlink()
    (out / "notes.txt").write_text("mine", encoding="utf-8")  # not a corridor name
    capsys.readouterr()
    assert cli(["run", str(cfg), "-q"]) == 2
    assert "notes.txt" in capsys.readouterr().err


# -- kills --------------------------------------------------------------------------

def _kill(p) -> None:
    p.send_signal(signal.SIGKILL)
    p.wait(timeout=30)
    p.stdout.close()
    p.stderr.close()


#: What corridor itself keeps beside the user's files: the outputs, the cache, and the
#: two lock files (flock files; a killed run leaves them, the next run takes them over).
KILLED_RUN_FILES = ("out", "out.cache", "out.lock", "out.cache.lock")


@pytest.mark.slow
def test_sigkill_at_random_points_keeps_outputs_whole_and_user_files_untouched(tmp_path):
    root = tmp_path / "u"
    cfg = user_folder(root)
    t0 = time.monotonic()
    rc, _, err = cli_run(cfg)
    run_s = time.monotonic() - t0
    assert rc == 0, err
    out = root / "out"
    user = tree(root, skip=KILLED_RUN_FILES)
    # a kill between two file moves, deterministic (the journal is written by then)
    marker = tmp_path / "paused"
    before = hashes(out)
    p = cli_run(cfg, pause=("move", marker, 60), wait=False)
    wait_for(marker, p)
    _kill(p)
    assert (out / owned.JOURNAL).exists()
    rc, _, err = cli_run(cfg)  # the next run finishes the interrupted publish first
    assert rc == 0, err
    assert "finishing the publish" in err
    assert_complete(out)
    # kills after random delays over the length of a run (seeded: reproducible)
    rng = random.Random(12)
    for _ in range(4):
        before = hashes(out)
        names_before = set(owned.owned_files(out))
        p = cli_run(cfg, wait=False)
        time.sleep(rng.uniform(0.0, run_s))
        _kill(p)
        journal = (out / owned.JOURNAL).exists()
        staged = any(f.name.startswith(owned.STAGING_PREFIX) for f in out.iterdir())
        owned.recover(out)  # what the next run does first, under the lock
        if hashes(out) != before:  # the kill came after the commit point, or the run ended
            manifest = assert_complete(out)
            assert set(manifest["files"]) == names_before
            # changed only past the commit point: journal written, or the publish over
            # (its staging folder gone) when the kill came
            assert journal or p.returncode == 0 or not staged
        assert tree(root, skip=KILLED_RUN_FILES) == user
    rc, _, err = cli_run(cfg)
    assert rc == 0, err
    assert_complete(out)
    assert tree(root, skip=KILLED_RUN_FILES) == user


def test_steps_folder_of_corridor_step_does_not_block_a_run(tmp_path, cli):
    """``corridor step`` writes into ``<output_dir>/steps`` by default; a run may follow."""
    cfg = make(tmp_path / "s")
    assert cli(["step", "expose", str(cfg), "-q"]) == 0
    steps = tree(tmp_path / "s" / "out" / "steps")
    assert "expose.json" in steps
    assert cli(["run", str(cfg), "-q"]) == 0
    assert_complete(tmp_path / "s" / "out")
    assert tree(tmp_path / "s" / "out" / "steps") == steps
