"""Measure the smallest breadth at which each shape kind is told from every other kind.

Writes the numbers behind ``synthgen.scene.kinds.IDENTIFIABLE_BREADTH``.  For every kind and
style (filled, outline-only) and every part of its parameter ranges (``synthgen.scene.kinds``),
objects are rendered alone at each breadth of a ladder (breadth: the shorter side of the
shape's own box), with a random aspect in ``MEASURED_ASPECT``, rotation and sub-pixel
position, and outline bands from ``MEASURED_STROKE`` to ``OUTLINE_SHARE`` of the breadth.
scikit-image describes each one (tests/_kind_descriptors.py) and a nearest-centroid
classifier, one centroid per kind, style and part, labels them:

1. every class starts with the largest breadth of the ladder as its threshold;
2. the classifier is trained on the training objects at or above the thresholds and labels
   the held-out objects at or above them;
3. class by class, the threshold moves one step down the ladder when every held-out object
   still gets its own kind, and stays otherwise; repeat until no threshold moves;
4. fresh objects (new seeds) at or above the thresholds are labelled; a class with a
   mislabelled one moves above that breadth, until two fresh sets in a row are labelled
   without error.

A kind's threshold for a style is the largest over its parts.

    python tools/measure_identifiable.py [--per-class 40] [--seed 1]    (about half an hour on one core)
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # for tests/_kind_descriptors.py

from synthgen import kinds  # noqa: E402
from tests._kind_descriptors import NearestCentroid, classes, descriptors, render, sample  # noqa: E402

LADDER = (3, 4, 5, 6, 7, 8, 10, 12, 14, 16, 20, 24, 28, 32, 40, 48, 64)
def render_all(cls, per_class: int, rng: np.random.Generator) -> dict:
    """Descriptors of ``2 * per_class`` objects per class and breadth: (class, breadth) -> (training, held out)."""
    data = {}
    for ci, c in enumerate(cls):
        for b in LADDER:
            if c[1] and kinds.OUTLINE_SHARE * b < kinds.MEASURED_STROKE:
                continue  # no outline band of at least MEASURED_STROKE fits
            x = np.array([descriptors(render(*sample(c, b, rng))) for _ in range(2 * per_class)])
            data[ci, b] = (x[:per_class], x[per_class:])
    return data


def train(data, threshold) -> NearestCentroid:
    """The classifier trained on the training objects at or above each class's threshold."""
    live = [key for key in data if key[1] >= threshold[key[0]]]
    x = np.concatenate([data[key][0] for key in live])
    return NearestCentroid().fit(x, [key[0] for key in live for _ in range(len(data[key][0]))])


def clean(cls, data, threshold, model) -> bool:
    """Whether ``model`` labels every held-out object at or above the thresholds with its kind."""
    return all(
        cls[p][0] == cls[ci][0]
        for (ci, b), (_, held) in data.items()
        if b >= threshold[ci]
        for p in model.predict(held)
    )


def measure(cls, data):
    """Thresholds (class -> breadth) lowered one ladder step at a time while every held-out object keeps its kind."""
    ladder = {ci: sorted(b for (cj, b) in data if cj == ci) for ci in range(len(cls))}
    threshold = {ci: steps[-1] for ci, steps in ladder.items()}
    if not clean(cls, data, threshold, train(data, threshold)):
        raise SystemExit("the kinds are not told apart even at the largest breadth")
    lowered = True
    while lowered:
        lowered = False
        for ci in range(len(cls)):
            steps = [b for b in ladder[ci] if b < threshold[ci]]
            if not steps:
                continue
            trial = {**threshold, ci: steps[-1]}
            if clean(cls, data, trial, train(data, trial)):
                threshold, lowered = trial, True
    return threshold


def check(cls, threshold, model, per_class: int, seed: int) -> dict:
    """Fresh objects of each class at or above its threshold: per class, the largest breadth with one mislabelled."""
    rng = np.random.default_rng(seed)
    worst = {}
    for ci, c in enumerate(cls):
        for b in LADDER:
            if b < threshold[ci]:
                continue
            x = np.array([descriptors(render(*sample(c, b, rng))) for _ in range(per_class)])
            if any(cls[p][0] != c[0] for p in model.predict(x)):
                worst[ci] = b
    return worst


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--per-class", type=int, default=40, help="training and held-out objects per class and breadth")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    cls = classes()
    data = render_all(cls, args.per_class, np.random.default_rng(args.seed))
    threshold = measure(cls, data)
    # fresh sets: a class with a mislabelled object moves above that breadth, until a set is clean
    clean_in_a_row = 0
    for round_ in range(1, 31):
        worst = check(cls, threshold, train(data, threshold), args.per_class, args.seed + round_)
        print(f"fresh set {round_}: {len(worst)} classes with a mislabelled object", file=sys.stderr)
        clean_in_a_row = 0 if worst else clean_in_a_row + 1
        if clean_in_a_row == 2:
            break
        for ci, b in worst.items():
            above = [v for v in LADDER if v > b]
            threshold[ci] = above[0] if above else 2 * LADDER[-1]
    else:
        raise SystemExit("no two fresh sets in a row came out clean")
    table = {}
    for ci, (kind, outline, _part) in enumerate(cls):
        table[kind, outline] = max(table.get((kind, outline), 0), threshold[ci])
    for ci, c in enumerate(cls):
        print(f"  {c}: {threshold[ci]}", file=sys.stderr)
    print("IDENTIFIABLE_BREADTH = {")
    for (kind, outline), b in table.items():
        print(f"    ({kind!r}, {outline}): {float(b)},")
    print("}")


if __name__ == "__main__":
    main()
