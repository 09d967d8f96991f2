"""Calibration figures of the check's swap witness and relabel typicality on outside sets.

For each set and each fixed transform, every swap the screen witnessed
(`augplan.check.rules.witness_holds`) is printed with the lower Wilson 95%
bound of its share, its typical share (`typical_share`) with that share's
lower bound, whether the pair is a true partner under the transform, and
whether the check offered a relabel for it. The margins
`SWAP_WITNESS_MARGIN` and `RELABEL_TYPICAL_SHARE` in augplan/thresholds.py
quote these figures.

Sets (outside data): printed characters from the fonts inside matplotlib
(tests/printed_letters.py; train from the DejaVu families, 24 renderings a
class, three rendering seeds), scikit-learn's digits (60 a class, dark ink
on white, 32 px) and the committed Fashion-MNIST subset (100 a class).

    .venv/bin/python benchmarks/calibrate_swaps.py [--workers 2]
"""

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
from PIL import Image

from augplan.check import check_recipe
from augplan.data import open_dataset
from augplan.measure.stats import wilson_interval
from augplan.recipe.parse import Recipe, Transform
from augplan.thresholds import RELABEL_TYPICAL_SHARE, SWAP_WITNESS_MARGIN

TESTS = Path(__file__).resolve().parents[1] / "tests"
MIRROR = Transform("flip", {"axis": "horizontal"})
UPSIDE_DOWN = Transform("flip", {"axis": "vertical"})
HALF_TURN = Transform("rotate", {"degrees": 180})


def _both_ways(*pairs):
    return {pair for a, b in pairs for pair in ((a, b), (b, a))}


def _letters(root, seed):
    sys.path.insert(0, str(TESTS))
    from printed_letters import PAIRED_CHARACTERS, PLAIN_CHARACTERS, write_letters_dataset

    write_letters_dataset(root, PAIRED_CHARACTERS + PLAIN_CHARACTERS, per_font_train=2, per_font_val=1, seed=seed)
    return root


def _digits(root):
    from sklearn.datasets import load_digits

    digits = load_digits()
    rng = np.random.default_rng(0)
    for digit in range(10):
        for index in rng.permutation(np.flatnonzero(digits.target == digit))[:60]:
            grey = (255 - digits.images[index] * (255 / 16)).astype(np.uint8)
            image = Image.fromarray(grey).resize((32, 32), Image.Resampling.BILINEAR).convert("RGB")
            for split in ("train", "val"):
                folder = root / split / str(digit)
                folder.mkdir(parents=True, exist_ok=True)
                image.save(folder / f"{index}.png")
    return root


def _fashion(root):
    with np.load(TESTS / "reference" / "fashion-mnist-subset.npz") as subset:
        images, labels, names = subset["train_images"], subset["train_labels"], subset["class_names"]
    for i, (image, label) in enumerate(zip(images, labels)):
        for split in ("train", "val"):
            folder = root / split / str(names[label]).replace("/", "-")
            folder.mkdir(parents=True, exist_ok=True)
            Image.fromarray(image).convert("RGB").save(folder / f"{i:04d}.png")
    return root


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    turn_letters = _both_ways(("b", "q"), ("d", "p"), ("n", "u"), ("6", "9"))
    cases = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for seed in (0, 1, 2):
            cases.append((f"letters seed {seed}", _letters(tmp / f"letters{seed}", seed), 32,
                          [(MIRROR, _both_ways(("b", "d"), ("p", "q"))), (HALF_TURN, turn_letters)]))
        cases.append(("digits", _digits(tmp / "digits"), 32,
                      [(MIRROR, set()), (UPSIDE_DOWN, set()), (HALF_TURN, _both_ways(("6", "9")))]))
        cases.append(("clothing", _fashion(tmp / "fashion"), 28, [(UPSIDE_DOWN, set()), (HALF_TURN, set())]))
        true_lows, false_lows = [], []
        print(f"{'set':16} {'transform':10} {'from':>12} {'to':>12} {'share':>6} {'w.low':>6} {'typ':>6} "
              f"{'t.low':>6} true relabel verdict")
        for name, root, size, transforms in cases:
            recipe = Recipe(name="calibration", transforms=tuple(t for t, _ in transforms))
            report = check_recipe(open_dataset(root), recipe, rng=np.random.default_rng(0), size=size,
                                      workers=args.workers)
            for entry, (_, partners) in zip(report["transforms"], transforms):
                relabel = (entry["suggestion"] or {}).get("relabel") or {}
                typical = {(s["from"], s["to"]): s["typical_low"] for s in entry["screen_swaps"]}
                for s in entry["screen_swaps"]:
                    pair = (s["from"], s["to"])
                    both = min(s["typical_low"], typical.get(pair[::-1], 0.0))
                    (true_lows if pair in partners else false_lows).append((both, name, entry["op"], pair))
                    print(f"{name:16} {entry['op']:10} {s['from']:>12} {s['to']:>12} {s['rate']:6.3f} "
                          f"{wilson_interval(s['moved'], s['n'])[0]:6.3f} {s['typical']:6.3f} "
                          f"{s['typical_low']:6.3f} {'yes' if pair in partners else 'no':4} "
                          f"{'yes' if relabel.get(s['from']) == s['to'] else 'no':7} {entry['verdict']}")
        print(f"\nwitness margin {SWAP_WITNESS_MARGIN}, relabel bound {RELABEL_TYPICAL_SHARE}")
        print("smallest typical lower bound (worse direction) of a true partner:", min(true_lows))
        print("largest typical lower bound (worse direction) of a false pair:", max(false_lows))


if __name__ == "__main__":
    main()
