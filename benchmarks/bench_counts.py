"""Peak memory and time per image as the requested object count grows, on a small and a large canvas.

Each case runs `make` (one worker, a few images) in its own process, so the peak
RSS is that case's alone (read with os.wait4).  Cases: 10, 1,000, 10,000 and
100,000 requested objects per image on 64x64 and 640x480, built-in defaults
otherwise (sizes 12-120 px, so on 64x64 nearly every object ends hidden).  A
request the config check refuses (more objects than the canvas can show
annotated) is printed as refused, with the time the refusal took, and is run
again with objects.min_area = 0 and render.samples = 8, which admit it.

Prints one line per case (seconds are the process's CPU time in `make` per
image, steadier than wall time on a shared machine) and, per canvas, the cost
per requested object at each count relative to 1,000 objects, all measured in
this run: at most linear growth shows as ratios near or below 1.

    python benchmarks/bench_counts.py [--images 2] [--counts 10,1000,10000,100000]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

CANVASES = ((64, 64), (640, 480))
ADMIT = ["objects.min_area=0", "render.samples=8"]


def child(width: int, height: int, count: int, images: int, extra: list[str]) -> None:
    """Run one case in this process; print a JSON line; exit 2 when the config is refused."""
    start = time.perf_counter()
    from synthgen.config import load_config
    from synthgen.errors import ConfigError
    from synthgen.run.make import make_dataset

    try:
        cfg = load_config(overrides=[
            f"count={images}", f"canvas.width={width}", f"canvas.height={height}",
            f"objects.count=[{count},{count}]", *extra,
        ])
    except ConfigError as exc:
        print(json.dumps({"refused": str(exc), "seconds": time.perf_counter() - start}))
        sys.exit(2)
    with tempfile.TemporaryDirectory() as d:
        t, cpu = time.perf_counter(), time.process_time()
        summary = make_dataset(cfg, Path(d) / "ds", workers=1)
        seconds, cpu = time.perf_counter() - t, time.process_time() - cpu
    print(json.dumps({"seconds": seconds, "cpu": cpu, "images": images, "objects": summary.objects,
                      "ignored": summary.ignored, "dropped": summary.dropped}))


def run_case(width: int, height: int, count: int, images: int, extra: list[str]) -> dict:
    """One case in a fresh process: its JSON line plus its peak RSS in MiB."""
    cmd = [sys.executable, __file__, "--child", str(width), str(height), str(count), "--images", str(images)]
    cmd += [f"--set={s}" for s in extra]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
    out = proc.stdout.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    result = json.loads(out.strip().splitlines()[-1])
    result["rss_mib"] = usage.ru_maxrss / 1024  # Linux reports KiB
    result["code"] = proc.returncode
    return result


def line(width: int, height: int, count: int, r: dict, note: str = "") -> str:
    head = f"{width:>4}x{height:<4} {count:>7} requested"
    if r["code"] == 2:
        return f"{head}  refused up front in {r['seconds']:.2f} s, peak RSS {r['rss_mib']:.0f} MiB: {r['refused']}"
    per_image = r["cpu"] / r["images"]
    shown = r["objects"] / r["images"]
    dropped = sum(r["dropped"].values()) / r["images"]
    return (f"{head}  {per_image:8.3f} s/image (CPU)  peak RSS {r['rss_mib']:6.0f} MiB  "
            f"annotated {shown:7.1f}/image  dropped {dropped:8.1f}/image{note}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=2)
    parser.add_argument("--counts", default="10,1000,10000,100000")
    parser.add_argument("--child", nargs=3, type=int, metavar=("W", "H", "N"))
    parser.add_argument("--set", action="append", default=[])
    args = parser.parse_args()
    if args.child:
        child(*args.child, args.images, args.set)
        return
    counts = [int(c) for c in args.counts.split(",")]
    print(f"make, 1 worker, {args.images} images per case; defaults but canvas and objects.count")
    for width, height in CANVASES:
        per_object = {}
        for count in counts:
            r = run_case(width, height, count, args.images, [])
            print(line(width, height, count, r), flush=True)
            if r["code"] == 2:
                r = run_case(width, height, count, args.images, ADMIT)
                print(line(width, height, count, r, "  (" + ", ".join(ADMIT) + ")"), flush=True)
            if r["code"] == 0:
                per_object[count] = r["cpu"] / r["images"] / count
        if 1000 in per_object:
            ratios = ", ".join(f"{c}: {per_object[c] / per_object[1000]:.2f}" for c in sorted(per_object) if c >= 1000)
            print(f"{width}x{height}: seconds per requested object relative to 1000 objects: {ratios}")


if __name__ == "__main__":
    main()
