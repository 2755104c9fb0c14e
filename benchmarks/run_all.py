"""Every benchmark, and one table of issue 19's six speed targets with the ratio achieved beside each.

All figures are measured in this run (machines drift by 20-30% between runs,
so only ratios within one run mean anything), with interleaved repetitions and
medians, in CPU seconds (user + system, of this process and the processes it
starts; ``--clock wall`` for elapsed time): every task timed here runs in one
process, so its CPU time is its cost on one core, and it stays steady when
other work shares the machine.  A ratio is ``achieved / target`` for a ceiling (``<= 1`` holds) and
``target / achieved`` for a floor such as images/s (again ``<= 1`` holds).

Targets (issue 19):

1. per-object cost: marginal ms per tiny (2-8 px) object <= 0.03 and per 16-96 px
   object <= 0.1 (render); whole ``make`` (PNG) of 1000 tiny objects <= 1.5x that of 10;
   100 default-size objects <= 20 ms render;
2. render (all but encode and write), 10 objects 640x480 <= 2.5 ms; ``render_scene``
   >= 300 images/s on a linear background, >= 200 on noise;
3. encoding: the PNG settings in use keep files within 10% of the old settings' size
   (demo and noise configs); their time against the old settings is shown;
4. start-up: ``synthgen --help`` <= 0.15 s, ``synthgen make --count 1`` <= 0.35 s;
5. the whole ``make`` command (one worker) <= 1.0x the hand-written Pillow script
   (``benchmarks/handwritten.py``) making the same number of images (and again with the
   script's numpy on one BLAS thread, as synthgen's commands run it);
6. the whole ``score`` command <= 0.5x faster-coco-eval's whole script on the
   ``bench_score`` data (skipped when faster-coco-eval is not installed).

Then it runs every other ``benchmarks/bench_*.py`` with small sizes (output in
``--log``), so each stays runnable; ``--skip-scripts`` leaves them out.

    python benchmarks/run_all.py [--quick] [--skip-scripts] [--log FILE]

``--quick`` uses tiny sizes and one repetition: a smoke run, its numbers mean nothing.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import bench_encode  # noqa: E402
import bench_make  # noqa: E402
import bench_score  # noqa: E402

from synthgen.config import load_config  # noqa: E402

#: Sizes of a full run (a few minutes on 2 cores) and of a smoke run.
SIZES = {
    "full": {"images": 8, "repeats": 5, "make_images": 12, "startup": 7, "hand_images": 100, "hand_repeats": 3,
             "score_images": 5000, "score_repeats": 2, "encode_images": 8},
    "quick": {"images": 1, "repeats": 1, "make_images": 1, "startup": 1, "hand_images": 2, "hand_repeats": 1,
              "score_images": 10, "score_repeats": 1, "encode_images": 1},
}

#: Render cases (in memory): name -> config overrides on top of a 640x480 noise background.
RENDER_CASES = {
    "10 mid": ["objects.count=[10,10]", "objects.size=[16,96]"],
    "10 mid linear": ["objects.count=[10,10]", "objects.size=[16,96]", "background.kind=linear"],
    "100 mid": ["objects.count=[100,100]", "objects.size=[16,96]"],
    "10 tiny": ["objects.count=[10,10]", "objects.size=[2,8]", "objects.min_area=0.5"],
    "1000 tiny": ["objects.count=[1000,1000]", "objects.size=[2,8]", "objects.min_area=0.5"],
    "100 default": ["objects.count=[100,100]"],
}

#: Other benchmark scripts and the small arguments they run with here (full, quick).
SCRIPTS = {
    "bench_backgrounds.py": (["--repeats", "5"], ["--repeats", "1", "--width", "64", "--height", "48"]),
    "bench_counts.py": (["--images", "1", "--counts", "10,1000"], ["--images", "1", "--counts", "10"]),
    "bench_dials.py": (["--images", "3"], ["--images", "1"]),
    "bench_encode.py": (["--images", "4", "--repeats", "2"], ["--images", "1", "--repeats", "1"]),
    "bench_formats.py": (["--images", "50"], ["--images", "5"]),
    "bench_make.py": (["--images", "10", "--repeats", "2"], ["--images", "1", "--repeats", "1"]),
    "bench_probe.py": (["--images", "8", "--repeats", "2"], ["--images", "2", "--repeats", "1"]),
    "bench_scale.py": (["--quick"], ["--quick"]),
    "bench_score.py": (["--images", "500", "--repeat", "2"], ["--images", "20", "--repeat", "1", "--no-pycocotools"]),
    "bench_shapes.py": ([], []),
    "bench_stream.py": (["--items", "20", "--rounds", "2"], ["--items", "2", "--rounds", "1"]),
    "bench_visible_box.py": (["--images", "2"], ["--images", "1"]),
    "bench_workers.py": (["--reps", "1", "--counts", "8,64"], ["--reps", "1", "--counts", "4"]),
}


def med(values) -> float:
    return statistics.median(values)


def cpu_seconds() -> float:
    """CPU time (user + system) of this process and of its finished child processes."""
    me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


#: The clock of every timing (set by --clock): CPU time by default, since on a machine shared with
#: other work the wall time of a single-process task mostly measures the others.
CLOCK = {"cpu": cpu_seconds, "wall": time.perf_counter}
clock = cpu_seconds


def interleaved(fns: dict, repeats: int) -> dict:
    """name -> list of seconds, calling every function once per repetition in turn."""
    times = {k: [] for k in fns}
    for _ in range(repeats):
        for k, fn in fns.items():
            t = clock()
            fn()
            times[k].append(clock() - t)
    return times


def render_ms(sz: dict) -> dict:
    """Case -> median ms per image of ``render_scene`` (in memory)."""
    n = sz["images"]
    cfgs = {k: load_config(overrides=[f"count={n}", "background.kind=noise", *v]) for k, v in RENDER_CASES.items()}
    for cfg in cfgs.values():
        bench_make.render_s(cfg)  # warm
    times = interleaved({k: (lambda c=c: bench_make.render_s(c)) for k, c in cfgs.items()}, sz["repeats"])
    return {k: 1000 * med(v) / n for k, v in times.items()}


def make_ratio_tiny(sz: dict, tmp: Path) -> float:
    """Whole make (PNG, one worker) of 1000 tiny objects over that of 10 objects of 16-96 px."""
    n = sz["make_images"]
    cfgs = {k: load_config(overrides=[f"count={n}", "background.kind=noise", *RENDER_CASES[k]])
            for k in ("10 mid", "1000 tiny")}
    fns = {k: (lambda c=c, k=k: bench_make.make_s(c, tmp / f"dial-{k}")) for k, c in cfgs.items()}
    times = interleaved(fns, sz["repeats"])
    return med(times["1000 tiny"]) / med(times["10 mid"])


def encoding(sz: dict) -> dict:
    """Per config: (ms now, ms old, size now / size old) of PNG encoding."""
    import numpy as np

    from synthgen.scene import render_scene

    enc = bench_encode.candidates()
    pick = {"now": enc["synthgen now (png)"], "old": enc["old: cv2 L1 filter search"]}
    out = {}
    for name in ("demo", "noise"):
        path, overrides = bench_encode.CONFIGS[name]
        cfg = load_config(path, overrides=[f"count={sz['encode_images']}", *overrides])
        images = [np.ascontiguousarray(render_scene(cfg, k).image) for k in range(cfg.count)]
        res = bench_encode.measure(images, pick, sz["repeats"])
        out[name] = (res["now"][1], res["old"][1], res["now"][2] / res["old"][2])
    return out


def _synthgen_cmd() -> list[str]:
    exe = shutil.which("synthgen", path=str(Path(sys.executable).parent))
    return [exe] if exe else [sys.executable, "-m", "synthgen"]


#: Environment of the timed processes: byte-code cached (under a private prefix, set in main), as in
#: an install by pip, even where PYTHONDONTWRITEBYTECODE is set (it makes every start compile
#: synthgen's modules again, about 0.1 s).
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def run_quiet(cmd: list[str], **env: str) -> None:
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True, env={**ENV, **env})


def startup_s(sz: dict, tmp: Path) -> dict:
    """Median wall seconds of ``synthgen --help`` and ``synthgen make --count 1`` (whole processes)."""
    sg = _synthgen_cmd()
    fns = {
        "help": lambda: run_quiet([*sg, "--help"]),
        "make1": lambda: run_quiet([*sg, "make", "--count", "1", "--out", str(tmp / "one"), "--overwrite", "-q"]),
    }
    interleaved(fns, 1)  # compile the byte-code once
    return {k: med(v) for k, v in interleaved(fns, sz["startup"]).items()}


def handwritten_ratio(sz: dict, tmp: Path) -> tuple[float, float, float, float]:
    """Whole ``synthgen make`` (one worker, linear background, 10 objects of 16-96 px, PNG level 1) over
    the hand-written script making as many images; both medians in seconds; and the script's median
    when it too runs numpy's BLAS on one thread, as synthgen's commands do (a check that the ratio
    does not come from that setting alone)."""
    n = str(sz["hand_images"])
    sg = _synthgen_cmd()
    ours = [*sg, "make", "--count", n, "--out", str(tmp / "hand-ours"), "--overwrite", "-q", "--workers", "1",
            "--set", "background.kind=linear", "--set", "objects.count=[10,10]", "--set", "objects.size=[16,96]",
            "--set", "output.png_level=1"]
    theirs = [sys.executable, str(HERE / "handwritten.py"), "--images", n, "--out", str(tmp / "hand-theirs")]
    t = interleaved({"ours": lambda: run_quiet(ours), "theirs": lambda: run_quiet(theirs),
                     "theirs 1": lambda: run_quiet(theirs, OPENBLAS_NUM_THREADS="1")}, sz["hand_repeats"])
    return med(t["ours"]) / med(t["theirs"]), med(t["ours"]), med(t["theirs"]), med(t["theirs 1"])


_FCE_SCRIPT = """
import sys, orjson
from faster_coco_eval import COCO, COCOeval_faster
gt = COCO(sys.argv[1])
dt = gt.loadRes(orjson.loads(open(sys.argv[2], 'rb').read()))
ev = COCOeval_faster(gt, dt, 'bbox')
ev.evaluate(); ev.accumulate(); ev.summarize()
"""


def score_ratio(sz: dict, tmp: Path) -> tuple[float, float, float] | None:
    """Whole ``synthgen score`` over faster-coco-eval's whole script on the same files (None: not installed)."""
    if importlib.util.find_spec("faster_coco_eval") is None:
        return None
    import orjson

    gt, preds = bench_score.make_data(sz["score_images"], 20, 50, 3)
    (tmp / "gt.json").write_bytes(orjson.dumps(gt))
    (tmp / "pred.json").write_bytes(orjson.dumps(preds))
    ours = [*_synthgen_cmd(), "score", str(tmp / "gt.json"), str(tmp / "pred.json")]
    theirs = [sys.executable, "-c", _FCE_SCRIPT, str(tmp / "gt.json"), str(tmp / "pred.json")]
    t = interleaved({"ours": lambda: run_quiet(ours), "theirs": lambda: run_quiet(theirs)}, sz["score_repeats"])
    return med(t["ours"]) / med(t["theirs"]), med(t["ours"]), med(t["theirs"])


def run_scripts(quick: bool, log: Path) -> list[str]:
    """Run every other benchmark script; return the names of those that failed."""
    failed = []
    with open(log, "w") as fh:
        for name, (full, small) in SCRIPTS.items():
            fh.write(f"\n===== {name} {' '.join(small if quick else full)}\n")
            fh.flush()
            rc = subprocess.run([sys.executable, str(HERE / name), *(small if quick else full)],
                                stdout=fh, stderr=subprocess.STDOUT).returncode
            if rc != 0:
                failed.append(name)
    return failed


def targets_table(r: dict, mk: float, enc: dict, su: dict, hand, score) -> list[tuple[str, str, str, str]]:
    """Rows (target, goal, achieved, ratio) of the six targets."""
    tiny = (r["1000 tiny"] - r["10 tiny"]) / 990
    mid = (r["100 mid"] - r["10 mid"]) / 90
    rows = [
        ("1 marginal ms per tiny object (render)", "<= 0.03", f"{tiny:.4f}", tiny / 0.03),
        ("1 marginal ms per 16-96 px object", "<= 0.1", f"{mid:.4f}", mid / 0.1),
        ("1 make 1000 tiny / make 10 (PNG)", "<= 1.5x", f"{mk:.2f}x", mk / 1.5),
        ("1 render 100 default objects, ms", "<= 20", f"{r['100 default']:.1f}", r["100 default"] / 20),
        ("2 render 10 objects, ms (noise bg)", "<= 2.5", f"{r['10 mid']:.2f}", r["10 mid"] / 2.5),
        ("2 render_scene/s, linear bg", ">= 300", f"{1000 / r['10 mid linear']:.0f}", 300 * r["10 mid linear"] / 1000),
        ("2 render_scene/s, noise bg", ">= 200", f"{1000 / r['10 mid']:.0f}", 200 * r["10 mid"] / 1000),
    ]
    for name, (now, old, size) in enc.items():
        rows.append((f"3 PNG size vs old settings, {name}", "<= 1.10", f"{size:.3f}", size / 1.10))
        rows.append((f"3 PNG encode ms now / old, {name}", "(info)", f"{now:.2f}/{old:.2f}", now / old))
    rows += [
        ("4 synthgen --help, s", "<= 0.15", f"{su['help']:.3f}", su["help"] / 0.15),
        ("4 synthgen make --count 1, s", "<= 0.35", f"{su['make1']:.3f}", su["make1"] / 0.35),
        ("5 make / hand-written script", "<= 1.0x", f"{hand[1]:.2f}s/{hand[2]:.2f}s", hand[0] / 1.0),
        ("5 ... script on one BLAS thread too", "<= 1.0x", f"{hand[1]:.2f}s/{hand[3]:.2f}s", hand[1] / hand[3]),
    ]
    if score is None:
        rows.append(("6 score / faster-coco-eval", "<= 0.5x", "not installed", float("nan")))
    else:
        rows.append(("6 score / faster-coco-eval", "<= 0.5x", f"{score[1]:.2f}s/{score[2]:.2f}s", score[0] / 0.5))
    return [(a, b, c, f"{d:.2f}") for a, b, c, d in rows]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny sizes, one repetition (smoke run)")
    parser.add_argument("--skip-scripts", action="store_true", help="only the targets table")
    parser.add_argument("--log", type=Path, default=None, help="where the other scripts' output goes")
    parser.add_argument("--clock", choices=tuple(CLOCK), default="cpu",
                        help="cpu: user + system time of this process and its children (default); wall: elapsed")
    args = parser.parse_args(argv)
    global clock
    clock = CLOCK[args.clock]
    sz = SIZES["quick" if args.quick else "full"]
    import cv2

    cv2.setNumThreads(1)
    start = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="synthgen-bench-") as d:
        tmp = Path(d)
        ENV["PYTHONPYCACHEPREFIX"] = str(tmp / "pycache")
        r = render_ms(sz)
        mk = make_ratio_tiny(sz, tmp)
        enc = encoding(sz)
        su = startup_s(sz, tmp)
        hand = handwritten_ratio(sz, tmp)
        score = score_ratio(sz, tmp)
        failed = []
        if not args.skip_scripts:
            log = args.log or Path(d) / "scripts.log"
            failed = run_scripts(args.quick, log)
            if args.log is None and failed:
                print(log.read_text(), file=sys.stderr)
    rows = targets_table(r, mk, enc, su, hand, score)
    print(f"speed targets ({'quick smoke run: numbers mean nothing' if args.quick else 'measured in this run'}; "
          f"{args.clock} time; {os.cpu_count()} cores, {time.perf_counter() - start:.0f} s); ratio <= 1 holds")
    widths = [max(len(row[i]) for row in rows) for i in range(4)]
    for row in [("target", "goal", "achieved", "ratio"), *rows]:
        print("  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip())
    if not args.skip_scripts:
        print(f"other benchmarks: {len(SCRIPTS) - len(failed)} of {len(SCRIPTS)} ran"
              + (f"; failed: {', '.join(failed)}" if failed else ""))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
