"""Scale and faults: streamed annotations, shards and merge, Dask, kill and resume, write errors."""

from __future__ import annotations

import errno
import hashlib
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import orjson
import pytest
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.config import load_config
from synthgen.errors import OutputWriteError, UserError
from synthgen.formats.images import decode_image
from synthgen.run.finish import build_coco
from synthgen.run.journal import RecordStore, Shard, decode_record, encode_record, journal_path, parse_shard
from synthgen.run.make import make_dataset
from synthgen.run.merge import merge_shards
from synthgen.run.render import render_image_record

ROOT = Path(__file__).resolve().parents[1]
TINY = ["count=11", "seed=5", "canvas.width=64", "canvas.height=48", "objects.count=[0, 6]", "objects.size=[3, 40]"]
TINY_CLI = [a for o in TINY for a in ("--set", o)]


def tree(path: Path) -> dict[str, bytes]:
    """Every file under ``path`` (hidden ones included) by relative name."""
    return {p.relative_to(path).as_posix(): p.read_bytes() for p in sorted(path.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def tiny_config():
    """Eleven 64x48 images of 0 to 6 objects (some images have none)."""
    return load_config(overrides=TINY)


@pytest.fixture(scope="module")
def single_run(tmp_path_factory, tiny_config):
    """The reference: one uninterrupted run with one worker."""
    out = tmp_path_factory.mktemp("single") / "ds"
    make_dataset(tiny_config, out, workers=1)
    return out


def test_streamed_annotations_equal_the_in_memory_dict(tiny_config, single_run):
    """The streamed file has the bytes of orjson.dumps of the whole COCO dict, and stdlib json reads it."""
    records = [render_image_record(tiny_config, k) for k in range(tiny_config.count)]
    reference = orjson.dumps(build_coco(tiny_config, records), option=orjson.OPT_SERIALIZE_NUMPY)
    written = (single_run / "annotations.json").read_bytes()
    assert written == reference
    assert json.loads(written) == json.loads(reference)  # Python's json module (RFC 8259 parser)


def test_finished_run_holds_only_the_dataset(single_run, tiny_config):
    """A finished run leaves images, annotations.json and manifest.json, no journal or temporary file."""
    names = set(tree(single_run))
    assert names == {"annotations.json", "manifest.json"} | {
        f"images/{k:06d}.png" for k in range(tiny_config.count)
    }


def test_journal_line_cut_short_is_ignored():
    """A record whose end was never written fails its length check; a whole one decodes."""
    line = encode_record(3, {"images/000003.png": "ab"}, {"min_area": 1}, {"id": 4}, [{"category_id": 1}])
    header, fragments = decode_record(line)
    assert header["index"] == 3 and fragments == [b'{"id":4}', b'{"category_id":1}']
    for cut in (1, len(line) // 2, len(line) - 1):
        assert decode_record(line[:cut]) is None


def test_record_store_takes_the_last_complete_record(tmp_path):
    """Loading a journal keeps the later record of a repeated index and stops before a partial line."""
    a = encode_record(0, {}, {}, {"id": 1, "v": "old"}, [])
    b = encode_record(0, {}, {}, {"id": 1, "v": "new"}, [])
    c = encode_record(1, {}, {}, {"id": 2}, [])
    path = tmp_path / "j.journal"
    path.write_bytes(a + b + c[:-5])
    store = RecordStore(2)
    assert store.load_journal(path) == len(a) + len(b)
    assert store.read(0)[1][0] == b'{"id":1,"v":"new"}' and store.missing(range(2)) == [1]
    store.close()


def test_parse_shard_rejects_bad_splits():
    """K/N needs whole numbers with 0 <= K < N."""
    assert parse_shard(" 1 / 3 ") == Shard(1, 3)
    for text in ("3/3", "1/0", "-1/2", "a/b", "2", ""):
        with pytest.raises(UserError, match="'--shard' must be K/N"):
            parse_shard(text)


def test_shard_holds_its_round_robin_images(tmp_path, tiny_config):
    """Shard 1 of 3 renders exactly the images whose index % 3 == 1, and writes a shard manifest."""
    out = tmp_path / "s1"
    summary = make_dataset(tiny_config, out, workers=1, shard=Shard(1, 3))
    names = sorted(p.name for p in (out / "images").iterdir())
    assert names == [f"{k:06d}.png" for k in range(tiny_config.count) if k % 3 == 1]
    manifest = json.loads((out / "shard-1-of-3.json").read_text())
    assert manifest["shard"]["index"] == 1 and manifest["counts"]["images"] == summary.images == 4
    assert not (out / "annotations.json").exists() and not (out / "manifest.json").exists()


def test_shards_merged_equal_a_single_run(tmp_path, tiny_config, single_run):
    """Three shard directories merged give the single run's files, byte for byte."""
    dirs = [tmp_path / f"s{k}" for k in range(3)]
    for k, d in enumerate(dirs):
        make_dataset(tiny_config, d, workers=1, shard=Shard(k, 3))
    before = [tree(d) for d in dirs]
    merge_shards(dirs, tmp_path / "merged")
    assert tree(tmp_path / "merged") == tree(single_run)
    assert [tree(d) for d in dirs] == before  # inputs untouched


def test_shards_in_one_shared_directory_merge_in_place(tmp_path, tiny_config, single_run):
    """Array jobs writing shards into one directory, then `merge DIR`, give the single run's files."""
    shared = tmp_path / "shared"
    for k in (2, 0, 1):  # any order
        make_dataset(tiny_config, shared, workers=1, shard=Shard(k, 3))
    res = CliRunner().invoke(app, ["merge", str(shared)])
    assert res.exit_code == 0, res.output
    assert tree(shared) == tree(single_run)


def test_more_shards_than_images_merge_to_a_single_run(tmp_path):
    """With 2 images in 3 shards one shard is empty; the merge still equals a single run."""
    cfg = load_config(overrides=TINY + ["count=2"])
    make_dataset(cfg, tmp_path / "single", workers=1)
    for k in range(3):
        make_dataset(cfg, tmp_path / "shared", workers=1, shard=Shard(k, 3))
    merge_shards([tmp_path / "shared"], tmp_path / "m")
    assert tree(tmp_path / "m") == tree(tmp_path / "single")


def test_merge_refuses_a_missing_shard(tmp_path, tiny_config):
    """Merging 2 of 3 shards names the missing one and writes nothing."""
    for k in (0, 2):
        make_dataset(tiny_config, tmp_path / f"s{k}", workers=1, shard=Shard(k, 3))
    res = CliRunner().invoke(app, ["merge", str(tmp_path / "s0"), str(tmp_path / "s2"), "--out", str(tmp_path / "m")])
    assert res.exit_code == 2 and "missing shard(s) 1/3" in res.stderr
    assert not (tmp_path / "m").exists()


def test_merge_refuses_a_damaged_image(tmp_path, tiny_config):
    """An image that no longer matches its shard's digest stops the merge with its path."""
    for k in (0, 1):
        make_dataset(tiny_config, tmp_path / f"s{k}", workers=1, shard=Shard(k, 2))
    victim = tmp_path / "s1" / "images" / "000003.png"
    victim.write_bytes(victim.read_bytes()[:-10])
    with pytest.raises(UserError, match="000003.png: is missing or damaged"):
        merge_shards([tmp_path / "s0", tmp_path / "s1"], tmp_path / "m")
    assert not (tmp_path / "m" / "manifest.json").exists()


def test_merge_with_a_bad_shard_leaves_the_output_as_it_was_and_a_retry_works(tmp_path, tiny_config, single_run):
    """A truncated image in the last shard: nothing is copied or cleared; after --resume there, the merge succeeds."""
    for k in (0, 1, 2):
        make_dataset(tiny_config, tmp_path / f"s{k}", workers=1, shard=Shard(k, 3))
    victim = tmp_path / "s2" / "images" / "000008.png"
    victim.write_bytes(victim.read_bytes()[:-10])
    out = tmp_path / "m"
    make_dataset(load_config(overrides=TINY + ["count=2"]), out, workers=1)  # an earlier dataset, to overwrite
    before = tree(out)
    dirs = [tmp_path / f"s{k}" for k in (0, 1, 2)]
    res = CliRunner().invoke(app, ["merge", *map(str, dirs), "--out", str(out), "--overwrite"])
    assert res.exit_code == 2 and "000008.png: is missing or damaged" in res.stderr
    assert tree(out) == before
    make_dataset(tiny_config, tmp_path / "s2", workers=1, shard=Shard(2, 3), resume=True)
    res = CliRunner().invoke(app, ["merge", *map(str, dirs), "--out", str(out), "--overwrite"])
    assert res.exit_code == 0, res.stderr
    assert tree(out) == tree(single_run)


def test_a_failed_copy_removes_what_merge_copied(tmp_path, tiny_config, monkeypatch):
    """A write failure half-way through the copy (disk full) leaves no copied image behind."""
    import synthgen.run.merge as merge_mod

    for k in (0, 1):
        make_dataset(tiny_config, tmp_path / f"s{k}", workers=1, shard=Shard(k, 2))
    real, calls = merge_mod.write_unsynced, []

    def failing(path, data):
        calls.append(path)
        if len(calls) > 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        real(path, data)

    monkeypatch.setattr(merge_mod, "write_unsynced", failing)
    with pytest.raises(OutputWriteError, match="No space left"):
        merge_shards([tmp_path / "s0", tmp_path / "s1"], tmp_path / "m")
    assert not (tmp_path / "m").exists()


def test_merge_refuses_shards_of_different_configs(tmp_path, tiny_config):
    """Shards made from different configs are refused, naming the differing key."""
    other = load_config(overrides=TINY + ["canvas.width=72"])
    make_dataset(tiny_config, tmp_path / "a", workers=1, shard=Shard(0, 2))
    make_dataset(other, tmp_path / "b", workers=1, shard=Shard(1, 2))
    with pytest.raises(UserError, match="canvas.width"):
        merge_shards([tmp_path / "a", tmp_path / "b"], tmp_path / "m")


def test_dask_local_cluster_equals_a_local_run(tmp_path, tiny_config, single_run):
    """Blocks rendered by a two-worker Dask LocalCluster give the single run's files."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        make_dataset(tiny_config, tmp_path / "dask", cluster=cluster.scheduler_address)
    assert tree(tmp_path / "dask") == tree(single_run)


def test_cluster_without_dask_says_how_to_install(tmp_path, monkeypatch):
    """Without dask.distributed, --cluster exits 2 with the install command and writes nothing."""
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes `import distributed` fail
    res = CliRunner().invoke(app, ["make", "--out", str(tmp_path / "d"), "--cluster", "local", *TINY_CLI, "-q"])
    assert res.exit_code == 2
    assert "pip install 'synthgen-shapes[cluster]'" in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def _journal_lines(out: Path) -> int:
    try:
        return (journal_path(out, Shard()).read_bytes()).count(b"\n")
    except FileNotFoundError:
        return 0


def _processes_with(tag: bytes) -> list[int]:
    """Pids whose environment holds ``tag`` (Linux /proc)."""
    found = []
    for environ in Path("/proc").glob("[0-9]*/environ"):
        try:
            if tag in environ.read_bytes().split(b"\0"):
                found.append(int(environ.parent.name))
        except OSError:
            pass
    return found


def _wait_until_gone(tag: bytes, seconds: float = 10.0) -> bool:
    deadline = time.monotonic() + seconds
    while _processes_with(tag):
        if time.monotonic() > deadline:
            return False
        time.sleep(0.05)
    return True


def test_killed_run_resumes_to_identical_files(tmp_path):
    """SIGKILL a real `synthgen make` mid-run; no final name holds a truncated file; --resume gives a clean run."""
    overrides = ["count=120", "seed=9", "canvas.width=96", "canvas.height=72", "objects.count=[2, 8]"]
    args = [a for o in overrides for a in ("--set", o)]
    out = tmp_path / "killed"
    tag = f"SYNTHGEN_TEST_RUN={os.getpid()}-{time.monotonic_ns()}"
    env = {**os.environ, "PYTHONPATH": str(ROOT), tag.split("=")[0]: tag.split("=")[1]}
    with open(tmp_path / "stderr.txt", "wb") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "synthgen", "make", "--out", str(out), "--workers", "2", "--quiet", *args],
            cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=err,
        )
        deadline = time.monotonic() + 60
        while _journal_lines(out) < 30 and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL, (tmp_path / "stderr.txt").read_text()
    assert _wait_until_gone(tag.encode()), "worker processes outlived the killed run"
    assert not (out / "manifest.json").exists() and not (out / "annotations.json").exists()
    finals = [p for p in (out / "images").iterdir() if not p.name.startswith(".")]
    assert 30 <= len(finals) < 120
    assert all(decode_image(p.read_bytes()) is not None for p in finals)  # OpenCV decodes every final file

    res = subprocess.run(
        [sys.executable, "-m", "synthgen", "make", "--out", str(out), "--resume", "--quiet", *args],
        cwd=ROOT, env=env, capture_output=True, text=True,
    )
    assert res.returncode == 0, res.stderr
    assert "kept from before" in res.stdout
    make_dataset(load_config(overrides=overrides), tmp_path / "clean", workers=1)
    assert tree(out) == tree(tmp_path / "clean")


def test_resume_repairs_missing_and_damaged_images(tmp_path, tiny_config, single_run):
    """Resume keeps intact images, regenerates a deleted one, a damaged one and a half-written record."""
    from synthgen.run.outdir import prepare_output
    from synthgen.run.render import render_block

    out = tmp_path / "r"
    prepare_output(out, tiny_config)  # what a run sets up before rendering
    lines = render_block(tiny_config, range(9), out)
    journal_path(out, Shard()).write_bytes(b"".join(lines[:8]) + lines[8][:40])  # image 8's record cut short
    (out / "images" / "000002.png").unlink()
    (out / "images" / "000005.png").write_bytes(b"not a png")
    summary = make_dataset(tiny_config, out, workers=1, resume=True)
    assert summary.kept == 6  # 0..7 journaled, minus the deleted and the damaged one
    assert tree(out) == tree(single_run)


def test_resume_of_a_finished_dataset_repairs_a_damaged_image(tmp_path, tiny_config, single_run):
    """--resume on a finished dataset checks the manifest digests and rewrites what differs."""
    out = tmp_path / "f"
    make_dataset(tiny_config, out, workers=1)
    (out / "images" / "000004.png").write_bytes(b"junk")
    (out / "images" / "000007.png").unlink()
    assert make_dataset(tiny_config, out, workers=1, resume=True).kept == tiny_config.count - 2
    assert tree(out) == tree(single_run)


def test_resume_of_a_finished_dataset_with_damaged_annotations_rebuilds_them(tmp_path, tiny_config, single_run):
    """A damaged annotations.json of a finished dataset is rebuilt by rendering the run again."""
    out = tmp_path / "f"
    make_dataset(tiny_config, out, workers=1)
    (out / "annotations.json").write_bytes(b'{"images": [')
    make_dataset(tiny_config, out, workers=1, resume=True)
    assert tree(out) == tree(single_run)


@pytest.mark.parametrize(
    ("code", "reason"), [(errno.EACCES, "Permission denied"), (errno.ENOSPC, "No space left on device")]
)
def test_write_error_mid_run_exits_1_and_stays_resumable(tmp_path, monkeypatch, single_run, code, reason):
    """A failing image write exits 1 with one line naming the file; --resume then completes the dataset."""
    import synthgen.run.render as dataset

    real = dataset.write_unsynced
    calls = []

    def failing(path, data):
        # Tests run as root, where a read-only directory does not stop writes: fail like the OS would.
        calls.append(path)
        if len(calls) > 4:
            raise OSError(code, os.strerror(code), str(path.parent / f".{path.name}.tmp"))
        real(path, data)

    monkeypatch.setattr(dataset, "write_unsynced", failing)
    out = tmp_path / "d"
    res = CliRunner().invoke(app, ["make", "--out", str(out), "--workers", "1", "-q", *TINY_CLI])
    assert res.exit_code == 1
    (line,) = res.stderr.strip().splitlines()
    assert f"cannot write {out / 'images' / '.000004.png.tmp'}: {reason}" in line and "--resume" in line
    assert not (out / "manifest.json").exists()

    monkeypatch.setattr(dataset, "write_unsynced", real)
    res = CliRunner().invoke(app, ["make", "--out", str(out), "--workers", "1", "-q", "--resume", *TINY_CLI])
    assert res.exit_code == 0, res.output
    assert "4 kept from before" in res.stdout
    assert tree(out) == tree(single_run)


def test_disk_full_while_writing_annotations_stays_resumable(tmp_path, monkeypatch, single_run):
    """ENOSPC while streaming annotations.json leaves no annotation file; --resume finishes without rendering."""
    import synthgen.run.journal as shards

    real_write = shards.AtomicWriter.write

    def full(self, data):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self.path))

    monkeypatch.setattr(shards.AtomicWriter, "write", full)
    out = tmp_path / "d"
    res = CliRunner().invoke(app, ["make", "--out", str(out), "--workers", "1", "-q", *TINY_CLI])
    assert res.exit_code == 1 and f"cannot write {out / 'annotations.json'}: No space left" in res.stderr
    assert sorted(p.name for p in out.iterdir()) == [".synthgen", "images"]  # no temp or partial file left

    monkeypatch.setattr(shards.AtomicWriter, "write", real_write)
    res = CliRunner().invoke(app, ["make", "--out", str(out), "--workers", "1", "-q", "--resume", *TINY_CLI])
    assert res.exit_code == 0 and "11 kept from before" in res.stdout
    assert tree(out) == tree(single_run)


def test_different_config_is_refused_naming_the_keys(tmp_path, tiny_config):
    """A directory made from another config is refused, naming each differing dotted key; nothing changes."""
    out = tmp_path / "d"
    make_dataset(tiny_config, out, workers=1)
    before = tree(out)
    other = load_config(overrides=TINY + ["canvas.width=80", "objects.count=[1, 2]"])
    for resume in (False, True):
        with pytest.raises(UserError, match=r"different config, differing in canvas\.width \(64 there, 80 here\), "
                                            r"objects\.count \(\[0,6\] there, \[1,2\] here\)"):
            make_dataset(other, out, workers=1, resume=resume)
    assert tree(out) == before
    make_dataset(other, out, workers=1, overwrite=True)
    assert json.loads((out / "manifest.json").read_text())["config"]["canvas"]["width"] == 80


def test_unfinished_run_without_resume_is_refused(tmp_path, tiny_config):
    """An unfinished run of the same config is not restarted silently: the message points to --resume."""
    out = tmp_path / "d"
    make_dataset(tiny_config, out, workers=1, shard=Shard(0, 2))
    with pytest.raises(UserError, match="pass --resume to continue it"):
        make_dataset(tiny_config, out, workers=1, shard=Shard(0, 2))


def test_manifest_digest_of_annotations_matches(single_run):
    """The manifest's digest of annotations.json is the sha256 of its bytes (hashlib)."""
    manifest = json.loads((single_run / "manifest.json").read_text())
    digest = hashlib.sha256((single_run / "annotations.json").read_bytes()).hexdigest()
    assert manifest["files"]["annotations.json"] == digest


@pytest.fixture
def small_disk(tmp_path):
    """A real 192 KiB filesystem (tmpfs) that a run fills up; skipped where mounting is not allowed."""
    mnt = tmp_path / "disk"
    mnt.mkdir()
    res = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=192k", "tmpfs", str(mnt)], capture_output=True)
    if res.returncode != 0:
        pytest.skip("filling a real disk needs permission to mount a small tmpfs (root with CAP_SYS_ADMIN)")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_full_disk_exits_1_naming_the_path_and_resumes(tmp_path, small_disk):
    """A real ENOSPC in a 2-worker run: exit 1, one line naming the file; after freeing space --resume completes."""
    overrides = ["count=40", "seed=4", "canvas.width=96", "canvas.height=72", "background.kind=noise"]
    args = [a for o in overrides for a in ("--set", o)]
    out = small_disk / "d"
    cmd = [sys.executable, "-m", "synthgen", "make", "--out", str(out), "--workers", "2", "--quiet", *args]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    res = subprocess.run(cmd, cwd=ROOT, env=env, capture_output=True, text=True)
    assert res.returncode == 1, res.stderr
    (line,) = res.stderr.strip().splitlines()
    # the file that did not fit: an image, the journal or the annotations
    assert re.search(rf"cannot write {re.escape(str(out))}/(images/\d{{6}}\.png|\.synthgen/0-of-1\.journal|"
                     r"annotations\.json): No space left on device", line), line
    assert "--resume" in line
    assert not (out / "manifest.json").exists()

    subprocess.run(["mount", "-o", "remount,size=8m", str(small_disk)], check=True)
    res = subprocess.run(cmd + ["--resume"], cwd=ROOT, env=env, capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    make_dataset(load_config(overrides=overrides), tmp_path / "clean", workers=1)
    assert tree(out) == tree(tmp_path / "clean")


def test_run_killed_before_its_run_record_resumes(tmp_path, tiny_config, single_run):
    """A directory with only empty images/ and .synthgen/ (killed at the very start) resumes from nothing."""
    out = tmp_path / "d"
    (out / "images").mkdir(parents=True)
    (out / ".synthgen").mkdir()
    make_dataset(tiny_config, out, workers=1, resume=True)
    assert tree(out) == tree(single_run)
