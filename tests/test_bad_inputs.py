"""Bad input never crashes: every case runs through ``augplan.cli.main`` in-process.

Each case asserts one of three outcomes:

- ``error``: exit 2 and a message on stderr naming the file (or flag) and the fault;
- ``skip``: the documented skip (README, "Data layout": files that are not images are listed
  and skipped), exit 0/1 and a warning on stderr naming the file and the fault;
- ``accept``: the input is valid (run with ``--strict``, so any skip would be exit 2).

and never a traceback. Data- and recipe-level faults go through ``preview``
(the cheapest command); flag faults through the command that owns the flag.
"""

import io
import json
import os
import struct
import zlib
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from conftest import draw_tiny_image, write_tiny_dataset

ERROR, SKIP, ACCEPT = "error", "skip", "accept"


class Ctx:
    """What a case may touch: its data folder, recipe, output folder, monkeypatch."""

    def __init__(self, tmp_path, monkeypatch):
        self.tmp = tmp_path
        self.data = write_tiny_dataset(tmp_path / "DATA")
        self.recipe = tmp_path / "recipe.yaml"
        self.recipe.write_text("name: tiny\ncopies: 1\ntransforms:\n  - op: flip\n    axis: horizontal\n",
                               encoding="utf-8")
        self.out = tmp_path / "out"
        self.out.mkdir()
        self.monkeypatch = monkeypatch

    def preview(self, *extra, data=None, recipe=None):
        return ["preview", data or self.data, "--recipe", recipe or self.recipe,
                "-o", self.out / "sheet.png", "--per-class", "1", "--draws", "1", *extra]

    def image(self, relpath, array=None):
        path = self.data / relpath
        path.parent.mkdir(parents=True, exist_ok=True)
        if array is None:
            array = draw_tiny_image(0, np.random.default_rng(len(relpath)))
        Image.fromarray(array).save(path)
        return path

    def recipe_text(self, text, name="bad.yaml"):
        path = self.tmp / name
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(text, encoding="utf-8")
        return self.preview(recipe=path)


# --------------------------------------------------------------------------
# Image files


def _truncated(ctx, fmt):
    path = ctx.data / "train" / "alpha" / f"cut.{fmt}"
    noise = np.random.default_rng(1).integers(0, 256, (64, 64, 3), dtype=np.uint8)
    Image.fromarray(noise).save(path)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    return ctx.preview()


def _zero_bytes(ctx):
    (ctx.data / "train" / "alpha" / "empty.png").write_bytes(b"")
    return ctx.preview()


def _text_as_png(ctx):
    (ctx.data / "train" / "alpha" / "notes.png").write_text("this is not a picture\n")
    return ctx.preview()


def _folder_as_png(ctx):
    (ctx.data / "train" / "alpha" / "folder.png").mkdir()
    return ctx.preview()


def _png_chunk(kind, payload):
    return (struct.pack(">I", len(payload)) + kind + payload
            + struct.pack(">I", zlib.crc32(kind + payload) & 0xFFFFFFFF))


def _bomb_header(ctx):
    # A PNG whose header claims 100,000 x 100,000 pixels: ~10^10, far over
    # Pillow's limit, yet the file is a few dozen bytes.
    header = struct.pack(">IIBBBBB", 100_000, 100_000, 8, 2, 0, 0, 0)
    data = (b"\x89PNG\r\n\x1a\n" + _png_chunk(b"IHDR", header)
            + _png_chunk(b"IDAT", zlib.compress(b"\x00" * 16)) + _png_chunk(b"IEND", b""))
    (ctx.data / "train" / "alpha" / "bomb.png").write_bytes(data)
    return ctx.preview()


def _bomb_lowered_limit(ctx):
    # The 16x16 images and the small contact sheet stay under a lowered limit
    # of 5,000 pixels; a 200x200 image (40,000 > 2 x 5,000) is over Pillow's
    # hard limit, as a real bomb is over the default one.
    ctx.monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 5000)
    ctx.image("train/alpha/big.png", np.full((200, 200, 3), 90, np.uint8))
    return ctx.preview()


def _file_symlink_loop(ctx):
    os.symlink("loop.png", ctx.data / "train" / "alpha" / "loop.png")
    return ctx.preview()


def _folder_symlink_loop(ctx):
    os.symlink("..", ctx.data / "train" / "alpha" / "up.png")
    return ctx.preview()


def _class_symlink_loop(ctx):
    os.symlink(".", ctx.data / "train" / "gamma")
    return ctx.preview()


def _unreadable(ctx):
    # Tests run as root, where chmod 000 does not stop reading: permission
    # denial is simulated by making os.open raise for one file.
    target = ctx.image("train/alpha/locked.png")
    real_open = os.open

    def os_open(path, *args, **kwargs):
        if Path(path).name == target.name:
            raise PermissionError(13, "Permission denied", str(path))
        return real_open(path, *args, **kwargs)

    ctx.monkeypatch.setattr(os, "open", os_open)
    return ctx.preview()


def _mode_image(mode):
    grey = (np.arange(256, dtype=np.uint8).reshape(16, 16))
    if mode == "I;16":
        return Image.fromarray(grey.astype(np.uint16) * 257), "png", {}
    if mode == "I":
        return Image.fromarray(grey.astype(np.int32) * 100), "tiff", {}
    if mode == "F":
        return Image.fromarray(grey.astype(np.float32) / 255.0), "tiff", {}
    image = Image.fromarray(draw_tiny_image(1, np.random.default_rng(2))).convert(mode)
    if mode == "P":
        return image, "png", {"transparency": 0}
    if mode == "CMYK":
        return image, "jpg", {}
    return image, "png", {}


def _any_mode(mode):
    def build(ctx):
        image, ext, options = _mode_image(mode)
        path = ctx.data / "train" / "alpha" / f"mode-{mode.replace(';', '')}.{ext}"
        image.save(path, **options)
        assert Image.open(path).mode == mode  # the file really is in that mode
        return ctx.preview("--strict")
    return build


def _one_pixel(ctx):
    ctx.image("train/alpha/dot.png", np.array([[[200, 10, 10]]], np.uint8))
    return ctx.preview("--strict", "--per-class", "6")


def _far_larger(ctx):
    y, x = np.mgrid[0:900, 0:1200]
    ctx.image("train/alpha/huge.png", np.stack([x % 256, y % 256, (x + y) % 256], -1).astype(np.uint8))
    return ctx.preview("--strict", "--per-class", "6")


def _exif_rotated(ctx):
    image = Image.fromarray(draw_tiny_image(0, np.random.default_rng(3), side=24)[:, :16])
    exif = Image.Exif()
    exif[0x0112] = 6  # Orientation: rotate 90 CW to display
    for n in range(3):
        image.save(ctx.data / "train" / "alpha" / f"rotated-{n}.jpg", exif=exif.tobytes())
    return ctx.preview("--strict", "--per-class", "6")


# --------------------------------------------------------------------------
# Folder layout


def _empty_class(ctx):
    (ctx.data / "train" / "gamma").mkdir()
    return ctx.preview()


def _single_class(ctx):
    for split in ("train", "val"):
        for path in sorted((ctx.data / split / "beta").iterdir()):
            path.unlink()
        (ctx.data / split / "beta").rmdir()
    return ctx.preview()


def _class_with_one_image(ctx):
    for path in sorted((ctx.data / "train" / "beta").iterdir())[1:]:
        path.unlink()
    return ctx.preview("--strict")


def _val_class_train_lacks(ctx):
    ctx.image("val/gamma/00.png")
    return ctx.preview()


def _unicode_classes(ctx):
    root = write_tiny_dataset(ctx.tmp / "DATA-unicode", classes=("red apple", "Äpfel ñandú", "日本 語"))
    return ctx.preview("--strict", data=root)


def _missing_data(ctx):
    return ctx.preview(data=ctx.tmp / "no-such-folder")


def _no_train(ctx):
    (ctx.tmp / "EMPTY").mkdir()
    return ctx.preview(data=ctx.tmp / "EMPTY")


def _loose_file_in_train(ctx):
    ctx.image("train/stray.png")
    return ctx.preview()


# --------------------------------------------------------------------------
# Recipes


def _nested_aliases(ctx):
    lines = ['l0: &l0 ["x", "x", "x", "x", "x", "x", "x", "x", "x"]']
    for level in range(1, 10):
        lines.append(f"l{level}: &l{level} [" + ", ".join([f"*l{level - 1}"] * 9) + "]")
    return ctx.recipe_text("\n".join(lines) + "\nname: laughs\n")


def _ten_megabytes(ctx):
    return ctx.recipe_text("name: big\n" + ("# " + "x" * 1022 + "\n") * (10 * 1024))


RECIPE_CASES = [
    ("recipe-empty", "", ["bad.yaml", "empty"]),
    ("recipe-list-not-mapping", "- flip\n- rotate\n", ["bad.yaml", "mapping"]),
    ("recipe-scalar-not-mapping", "just words\n", ["bad.yaml", "mapping"]),
    ("recipe-tab-indent", "name: t\ntransforms:\n\t- op: flip\n", ["bad.yaml", "tab"]),
    ("recipe-duplicate-key", "name: a\ncopies: 1\nname: b\n", ["bad.yaml", "'name'", "twice"]),
    ("recipe-unknown-op", "name: t\ntransforms:\n  - op: rotat\n    degrees: 5\n",
     ["bad.yaml", "rotat", "rotate"]),
    ("recipe-misspelled-field", "name: t\ntransforms:\n  - op: flip\n    axis: horizontal\n    probabilty: 0.5\n",
     ["bad.yaml", "probabilty", "probability"]),
    ("recipe-wrong-type-range", "name: t\ntransforms:\n  - op: rotate\n    degrees: lots\n",
     ["bad.yaml", "degrees", "lots"]),
    ("recipe-wrong-type-copies", "name: t\ncopies: many\n", ["bad.yaml", "copies", "many"]),
    ("recipe-inverted-range", "name: t\ntransforms:\n  - op: rotate\n    degrees: [15, -15]\n",
     ["bad.yaml", "degrees", "low <= high"]),
    ("recipe-probability-above-1",
     "name: t\ntransforms:\n  - op: flip\n    axis: horizontal\n    probability: 1.5\n",
     ["bad.yaml", "probability", "1.5"]),
    ("recipe-probability-negative",
     "name: t\ntransforms:\n  - op: flip\n    axis: horizontal\n    probability: -0.1\n",
     ["bad.yaml", "probability", "-0.1"]),
    ("recipe-zoom-zero", "name: t\ntransforms:\n  - op: zoom\n    factor: 0\n", ["bad.yaml", "factor", "between 0.1"]),
    ("recipe-zoom-negative", "name: t\ntransforms:\n  - op: zoom\n    factor: [-1, 1.2]\n",
     ["bad.yaml", "factor", "between 0.1"]),
    ("recipe-nan", "name: t\ntransforms:\n  - op: rotate\n    degrees: [.nan, 3]\n", ["bad.yaml", "degrees", "nan"]),
    ("recipe-infinite", "name: t\ntransforms:\n  - op: brightness\n    factor: [0.5, .inf]\n",
     ["bad.yaml", "factor", "inf"]),
    ("recipe-probability-nan",
     "name: t\ntransforms:\n  - op: flip\n    axis: horizontal\n    probability: .nan\n",
     ["bad.yaml", "probability", "nan"]),
    ("recipe-non-utf8", b"name: caf\xe9\xff\n", ["bad.yaml", "UTF-8"]),
    ("recipe-no-name", "transforms: []\n", ["bad.yaml", "name"]),
    ("recipe-bad-axis", "name: t\ntransforms:\n  - op: flip\n    axis: diagonal\n", ["bad.yaml", "axis", "diagonal"]),
    ("recipe-bad-fill", "name: t\nfill: wrap\n", ["bad.yaml", "fill", "wrap"]),
    # sane bounds per field: values the engine cannot compute are refused by the checker
    ("recipe-huge-degrees", "name: t\ntransforms:\n  - op: rotate\n    degrees: [-1e308, 1e308]\n",
     ["bad.yaml line 4", "degrees", "between -360 and 360"]),
    ("recipe-huge-blur", "name: t\ntransforms:\n  - op: blur\n    sigma: 1e308\n",
     ["bad.yaml line 4", "sigma", "between 0 and 20"]),
    ("recipe-tiny-zoom", "name: t\ntransforms:\n  - op: zoom\n    factor: 1e-300\n",
     ["bad.yaml line 4", "factor", "between 0.1 and 10"]),
    ("recipe-huge-noise", "name: t\ntransforms:\n  - op: noise\n    sigma: 1e308\n",
     ["bad.yaml line 4", "sigma", "between 0 and 1"]),
    ("recipe-huge-hue", "name: t\ntransforms:\n  - op: hue\n    degrees: [-400, 10]\n",
     ["bad.yaml line 4", "degrees", "between -180 and 180"]),
    ("recipe-billion-copies", "name: t\ncopies: 1000000000\n", ["bad.yaml line 2", "copies", "<= 1000"]),
    ("recipe-huge-seed", "name: t\nseed: 1180591620717411303424\n", ["bad.yaml line 2", "seed", "<="]),
    # names become file names (vet writes vetted-<name>.yaml): refused when read
    ("recipe-name-with-slash", "name: a/b\n", ["bad.yaml line 1", "'name'", "file name", "a/b"]),
    ("recipe-name-300-characters", f"name: {'n' * 300}\n", ["bad.yaml line 1", "'name'", "100 bytes"]),
    ("recipe-name-leading-dot", "name: .hidden\n", ["bad.yaml line 1", "'name'", "'.'"]),
    # relabel is one-to-one: two classes into one would merge them
    ("recipe-relabel-two-into-one",
     "name: t\ntransforms:\n  - op: flip\n    relabel: {alpha: beta, gamma: beta}\n",
     ["bad.yaml line 4", "relabel", "one-to-one", "'alpha' and 'gamma'"]),
    ("recipe-relabel-to-itself", "name: t\ntransforms:\n  - op: flip\n    relabel: {alpha: alpha}\n",
     ["bad.yaml line 4", "relabel", "itself"]),
]


def _recipe_case(text):
    return lambda ctx: ctx.recipe_text(text)


def _class_case(step, command="preview"):
    """A recipe whose scope or relabel names ``step``'s classes, run through ``command``."""
    def build(ctx):
        path = ctx.tmp / "scoped.yaml"
        path.write_text(f"name: scoped\ncopies: 1\ntransforms:\n  - op: flip\n    {step}\n", encoding="utf-8")
        if command == "preview":
            return ctx.preview(recipe=path)
        if command == "draft":  # a starting recipe is held to the data's classes too
            return ["draft", ctx.data, "--start", path, "-o", ctx.tmp / "draft.yaml", "--quiet"]
        extra = {"evaluate": ["--repeats", "1"], "vet": ["-o", ctx.tmp / "vetted", "--repeats", "1"]}
        return [command, ctx.data, "--recipe", path, "--quiet", *extra.get(command, [])]
    return build


def _recipe_fifo(ctx):
    os.mkfifo(ctx.tmp / "fifo.yaml")
    return ctx.preview(recipe=ctx.tmp / "fifo.yaml")


def _recipe_dev_zero(ctx):
    os.symlink("/dev/zero", ctx.tmp / "zero.yaml")
    return ctx.preview(recipe=ctx.tmp / "zero.yaml")


def _image_link_to_dev_zero(ctx):
    os.symlink("/dev/zero", ctx.data / "train" / "alpha" / "zero.png")
    return ctx.preview()


def _image_link_to_fifo(ctx):
    os.mkfifo(ctx.tmp / "pipe")
    os.symlink(ctx.tmp / "pipe", ctx.data / "train" / "alpha" / "pipe.png")
    return ctx.preview()


def _image_fifo(ctx):
    os.mkfifo(ctx.data / "train" / "alpha" / "fifo.png")
    return ctx.preview()


def _folder_symlink_out(ctx):
    outside = ctx.image("../outside-folder-link.png")
    os.symlink(outside, ctx.data / "train" / "alpha" / "link.png")
    return ctx.preview()


def _folder_symlink_inside(ctx):
    os.symlink(ctx.data / "train" / "alpha" / "00.png", ctx.data / "train" / "alpha" / "same.png")
    return ctx.preview("--strict")


# --------------------------------------------------------------------------
# CSV manifests


def _manifest(ctx, text):
    path = ctx.data / "manifest.csv"
    path.write_text(text, encoding="utf-8")
    return ctx.preview(data=path)


def _manifest_rows(ctx):
    rows = ["path,label,split"]
    for split in ("train", "val"):
        for label in ("alpha", "beta"):
            rows += [f"{split}/{label}/{p.name},{label},{split}"
                     for p in sorted((ctx.data / split / label).iterdir())]
    return rows


def _manifest_missing_column(ctx):
    return _manifest(ctx, "\n".join(r.rsplit(",", 1)[0] for r in _manifest_rows(ctx)) + "\n")


def _manifest_missing_file(ctx):
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ["train/alpha/gone.png,alpha,train"]) + "\n")


def _manifest_dotdot(ctx):
    ctx.image("../outside.png")
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ["../outside.png,alpha,train"]) + "\n")


def _manifest_absolute(ctx):
    outside = ctx.image("../outside-abs.png")
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + [f"{outside.resolve()},alpha,train"]) + "\n")


def _manifest_symlink_out(ctx):
    ctx.image("../outside-link.png")
    os.symlink(ctx.tmp / "outside-link.png", ctx.data / "train" / "alpha" / "link.png")
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ["train/alpha/link.png,alpha,train"]) + "\n")


def _manifest_nul_byte(ctx):
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ["train/alpha/0\x000.png,alpha,train"]) + "\n")


def _manifest_huge_field(ctx):
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ['"' + "x" * 140_000 + '",alpha,train']) + "\n")


def _manifest_unknown_split(ctx):
    return _manifest(ctx, "\n".join(_manifest_rows(ctx) + ["train/alpha/00.png,alpha,holdout"]) + "\n")


# --------------------------------------------------------------------------
# Flags and outputs


def _strict_non_image(ctx):
    (ctx.data / "train" / "alpha" / "readme.txt").write_text("notes\n")
    return ctx.preview("--strict")


def _output_in_missing_folder(ctx):
    return ["preview", ctx.data, "--recipe", ctx.recipe, "-o", ctx.tmp / "missing" / "sheet.png",
            "--per-class", "1", "--draws", "1"]


def _draft_output_in_missing_folder(ctx):
    return ["draft", ctx.data, "-o", ctx.tmp / "missing" / "draft.yaml", "--quiet"]


def _missing_recipe(ctx):
    return ctx.preview(recipe=ctx.tmp / "no-such-recipe.yaml")


def _recipe_is_folder(ctx):
    return ctx.preview(recipe=ctx.data)


def _bad_approve(ctx):
    return ["vet", ctx.data, "--recipe", ctx.recipe, "-o", ctx.tmp / "vetted", "--approve", "three,five"]


def _workers(value):
    return lambda ctx: ["check", ctx.data, "--recipe", ctx.recipe, "--workers", value]


def _check_sample_zero(ctx):
    return ["check", ctx.data, "--recipe", ctx.recipe, "--sample", "0"]


def _evaluate_repeats_zero(ctx):
    return ["evaluate", ctx.data, "--recipe", ctx.recipe, "--repeats", "0"]


def _seed_not_a_number(ctx):
    return ctx.preview("--seed", "seven")


def _seed_for(command, value):
    def build(ctx):
        if command == "preview":
            return ctx.preview("--seed", value)
        extra = {"draft": ["-o", ctx.tmp / "draft.yaml"], "vet": ["--recipe", ctx.recipe, "-o", ctx.tmp / "v"],
                 "check": ["--recipe", ctx.recipe], "coverage": ["--recipe", ctx.recipe],
                 "evaluate": ["--recipe", ctx.recipe]}
        return [command, ctx.data, *extra[command], "--seed", value]
    return build


def _model_for(command, value):
    def build(ctx):
        extra = ["-o", ctx.tmp / "v"] if command == "vet" else []
        return [command, ctx.data, "--recipe", ctx.recipe, *extra, "--model", value]
    return build


def _ledger_inside_data(command):
    def build(ctx):
        extra = ["-o", ctx.tmp / "vetted"] if command == "vet" else []
        return [command, ctx.data, "--recipe", ctx.recipe, "--repeats", "1", "--quiet", *extra,
                "--ledger", ctx.data / "val" / "ledger.sqlite"]
    return build


def _cache_inside_data(ctx):
    return ["evaluate", ctx.data, "--recipe", ctx.recipe, "--repeats", "1", "--quiet",
            "--cache", ctx.data / "features"]


def _preview_over_recipe(ctx):
    return ["preview", ctx.data, "--recipe", ctx.recipe, "-o", ctx.recipe, "--per-class", "1", "--draws", "1"]


def _preview_into_folder(ctx):
    return ["preview", ctx.data, "--recipe", ctx.recipe, "-o", ctx.out, "--per-class", "1", "--draws", "1"]


def _foreign_ledger(ctx):
    import sqlite3

    path = ctx.tmp / "contacts.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE people (name TEXT)")
    return ["history", "--ledger", path]


def _damaged_ledger(ctx):
    from augplan.evaluate import ledger

    path = ctx.tmp / "ledger.sqlite"
    ledger.store_results(path, fingerprint="f" * 64, settings_key="s" * 24, seed=0, repeats=1,
                         baseline={}, results=[{"recipe_hash": f"{n:064x}", "name": "x" * 3000}
                                               for n in range(40)])
    data = bytearray(path.read_bytes())
    data[4096:8192] = b"\xff" * 4096  # the second page overwritten
    path.write_bytes(bytes(data))
    return ["history", "--ledger", path]


def _newer_ledger(ctx):
    import sqlite3

    path = ctx.tmp / "ledger.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute("PRAGMA user_version = 99")
    return ["history", "--ledger", path]


def _unknown_command(ctx):
    return ["frobnicate", ctx.data]


def _ledger_not_sqlite(ctx):
    return ["history", "--ledger", ctx.recipe]


def _same_recipe_twice(ctx):
    return ["evaluate", ctx.data, "--recipe", ctx.recipe, "--recipe", ctx.recipe, "--repeats", "1"]


CASES = [
    # image files: skipped with a warning naming the file and the fault
    pytest.param(lambda c: _truncated(c, "png"), SKIP, ["cut.png", "truncated"], id="truncated-png"),
    pytest.param(lambda c: _truncated(c, "jpg"), SKIP, ["cut.jpg", "truncated"], id="truncated-jpeg"),
    pytest.param(_zero_bytes, SKIP, ["empty.png", "0 bytes"], id="zero-byte-file"),
    pytest.param(_text_as_png, SKIP, ["notes.png", "not an image"], id="text-file-named-png"),
    pytest.param(_folder_as_png, SKIP, ["folder.png", "folder"], id="folder-named-like-image"),
    pytest.param(_bomb_header, SKIP, ["bomb.png", "decompression bomb"], id="decompression-bomb-header"),
    pytest.param(_bomb_lowered_limit, SKIP, ["big.png", "decompression bomb"], id="decompression-bomb-lowered-limit"),
    pytest.param(_file_symlink_loop, SKIP, ["loop.png", "cannot read"], id="file-symlink-loop"),
    pytest.param(_folder_symlink_loop, SKIP, ["up.png", "folder symlink"], id="folder-symlink-loop"),
    pytest.param(_class_symlink_loop, SKIP, ["train/gamma", "symlink"], id="class-folder-symlink"),
    pytest.param(_unreadable, SKIP, ["locked.png", "permission denied"], id="unreadable-file-simulated"),
    pytest.param(_empty_class, SKIP, ["train/gamma", "empty class folder"], id="empty-class-folder"),
    pytest.param(_loose_file_in_train, SKIP, ["stray.png", "outside a class folder"], id="file-outside-class"),
    # images that are fine, in any mode or shape (run with --strict)
    *[pytest.param(_any_mode(mode), ACCEPT, [], id=f"mode-{mode}")
      for mode in ("1", "L", "LA", "P", "RGB", "RGBA", "I;16", "I", "F", "CMYK")],
    pytest.param(_one_pixel, ACCEPT, [], id="one-by-one-image"),
    pytest.param(_far_larger, ACCEPT, [], id="image-far-larger-than-others"),
    pytest.param(_exif_rotated, ACCEPT, [], id="exif-rotated-jpeg"),
    pytest.param(_class_with_one_image, ACCEPT, [], id="class-with-one-image"),
    pytest.param(_unicode_classes, ACCEPT, [], id="class-names-spaces-non-ascii"),
    # folder layout
    pytest.param(_single_class, ERROR, ["DATA", "only one training class"], id="single-class"),
    pytest.param(_val_class_train_lacks, ERROR, ["gamma", "train lacks"], id="val-class-train-lacks"),
    pytest.param(_missing_data, ERROR, ["no-such-folder", "not found"], id="missing-data-folder"),
    pytest.param(_no_train, ERROR, ["EMPTY", "no train/ folder"], id="data-folder-without-train"),
    # recipes
    *[pytest.param(_recipe_case(text), ERROR, needles, id=name) for name, text, needles in RECIPE_CASES],
    pytest.param(_nested_aliases, ERROR, ["bad.yaml", "alias"], id="recipe-nested-anchors-aliases"),
    pytest.param(_ten_megabytes, ERROR, ["bad.yaml", "too large"], id="recipe-10-megabytes"),
    pytest.param(_missing_recipe, ERROR, ["no-such-recipe.yaml", "not found"], id="recipe-missing"),
    pytest.param(_recipe_is_folder, ERROR, ["DATA", "folder"], id="recipe-is-a-folder"),
    # CSV manifests
    pytest.param(_manifest_missing_column, ERROR, ["manifest.csv", "split"], id="manifest-missing-column"),
    pytest.param(_manifest_missing_file, ERROR, ["manifest.csv", "gone.png", "not found"], id="manifest-missing-file"),
    pytest.param(_manifest_dotdot, ERROR, ["manifest.csv", "outside.png", ".."], id="manifest-path-dotdot"),
    pytest.param(_manifest_absolute, ERROR, ["manifest.csv", "outside-abs.png", "absolute"], id="manifest-absolute-path"),
    pytest.param(_manifest_symlink_out, ERROR, ["manifest.csv", "link.png", "outside the data folder"],
                 id="manifest-symlink-escapes"),
    pytest.param(_manifest_unknown_split, ERROR, ["manifest.csv", "holdout"], id="manifest-unknown-split"),
    pytest.param(_manifest_nul_byte, ERROR, ["manifest.csv line", "NUL"], id="manifest-nul-byte"),
    pytest.param(_manifest_huge_field, ERROR, ["manifest.csv line", "field larger"], id="manifest-field-over-limit"),
    # files that are not what they seem: only regular files are read
    pytest.param(_recipe_fifo, ERROR, ["fifo.yaml", "FIFO", "regular file"], id="recipe-is-a-fifo"),
    pytest.param(_recipe_dev_zero, ERROR, ["zero.yaml", "device", "regular file"], id="recipe-is-dev-zero"),
    pytest.param(_image_link_to_dev_zero, SKIP, ["zero.png", "outside the data folder"], id="image-link-to-dev-zero"),
    pytest.param(_image_link_to_fifo, SKIP, ["pipe.png", "outside the data folder"], id="image-link-to-fifo"),
    pytest.param(_image_fifo, SKIP, ["fifo.png", "FIFO", "regular file"], id="image-is-a-fifo"),
    # one rule for folders and manifests: links are followed only within the data folder
    pytest.param(_folder_symlink_out, SKIP, ["link.png", "outside the data folder"], id="folder-symlink-escapes"),
    pytest.param(_folder_symlink_inside, ACCEPT, [], id="folder-symlink-within-data"),
    # class names in only/except/relabel must be classes of the data
    pytest.param(_class_case("only: [alphaa]"), ERROR,
                 ["scoped.yaml line 5", "'only'", "alphaa", "closest class is 'alpha'"], id="only-misspelt-class"),
    pytest.param(_class_case("except: [gamma]"), ERROR, ["scoped.yaml line 5", "'except'", "gamma", "lacks"],
                 id="except-unknown-class"),
    *[pytest.param(_class_case("relabel: {alpha: ghost, ghost: alpha}", command), ERROR,
                   ["scoped.yaml line 5", "'relabel'", "ghost", "lacks"], id=f"relabel-ghost-class-{command}")
      for command in ("preview", "check", "coverage", "evaluate", "vet")],
    pytest.param(_class_case("only: [alphaa]", "draft"), ERROR,
                 ["scoped.yaml line 5", "'only'", "alphaa", "closest class is 'alpha'"], id="draft-start-misspelt-class"),
    pytest.param(lambda c: ["draft", c.data, "--start", "aerial-tile", "-o", c.tmp / "d.yaml"], ERROR,
                 ["--start aerial-tile", "no shipped recipe", "did you mean 'aerial-tiles'", "radiographs",
                  "handwritten-characters"], id="draft-start-names-nothing"),
    pytest.param(lambda c: ["draft", c.data, "--start", c.tmp / "none.yaml", "-o", c.tmp / "d.yaml"], ERROR,
                 ["none.yaml", "no such recipe file", "aerial-tiles"], id="draft-start-missing-file"),
    pytest.param(lambda c: ["draft", "--start", "radiographs"], ERROR, ["DATA is required unless --list"],
                 id="draft-without-data"),
    # flags and outputs
    pytest.param(_strict_non_image, ERROR, ["readme.txt", "strict"], id="strict-non-image"),
    pytest.param(_output_in_missing_folder, ERROR, ["missing", "does not exist"], id="output-in-missing-folder"),
    pytest.param(_draft_output_in_missing_folder, ERROR, ["missing", "does not exist"],
                 id="draft-output-in-missing-folder"),
    pytest.param(_bad_approve, ERROR, ["--approve", "three,five"], id="vet-bad-approve"),
    pytest.param(_workers("0"), ERROR, ["--workers", "0"], id="workers-zero"),
    pytest.param(_workers("-4"), ERROR, ["--workers", "-4"], id="workers-negative"),
    pytest.param(_check_sample_zero, ERROR, ["--sample", "0"], id="check-sample-zero"),
    pytest.param(_evaluate_repeats_zero, ERROR, ["--repeats", "0"], id="evaluate-repeats-zero"),
    pytest.param(_seed_not_a_number, ERROR, ["--seed", "seven"], id="seed-not-a-number"),
    # verify and history draw nothing, so they take no seed.
    pytest.param(lambda c: ["verify", c.tmp / "vetted-recipe.yaml", "--seed", "3"], ERROR,
                 ["unrecognized arguments: --seed"], id="verify-takes-no-seed"),
    pytest.param(lambda c: ["history", "--seed", "3"], ERROR, ["unrecognized arguments: --seed"],
                 id="history-takes-no-seed"),
    *[pytest.param(_seed_for(command, value), ERROR, ["--seed", value], id=f"{command}-seed-{label}")
      for command in ("preview", "check", "coverage", "evaluate", "draft", "vet")
      for value, label in (("-1", "negative"), (str(2**70), "2-to-the-70"))],
    *[pytest.param(_model_for(command, value), ERROR, ["--model", *needles], id=f"{command}-model-{label}")
      for command in ("evaluate", "vet")
      for value, label, needles in (("svm", "unknown", ["'svm'", "cnn (default, the network), linear (the quick proxy), or module:callable"]),
                                    ("no_such_team_module:fit", "missing-module", ["cannot import module"]),
                                    ("team_training:returns_no_predictor", "no-predictor",
                                     ["must return an object with predict"]))],
    pytest.param(lambda c: ["draft", c.data, "-o", c.tmp / "d.yaml", "--name", "a/b"], ERROR,
                 ["--name", "file name", "a/b"], id="draft-name-not-file-safe"),
    pytest.param(_unknown_command, ERROR, ["frobnicate", "invalid choice"], id="unknown-command"),
    # where augplan writes: never into the data, never over an input
    *[pytest.param(_ledger_inside_data(command), ERROR, ["ledger.sqlite", "inside the data folder"],
                   id=f"{command}-ledger-inside-data") for command in ("evaluate", "vet")],
    pytest.param(_cache_inside_data, ERROR, ["features", "inside the data folder"], id="evaluate-cache-inside-data"),
    pytest.param(_preview_over_recipe, ERROR, ["recipe.yaml", "no output may replace an input"],
                 id="preview-output-is-the-recipe"),
    pytest.param(_preview_into_folder, ERROR, ["out", "is a folder"], id="preview-output-is-a-folder"),
    # damaged stores
    pytest.param(_foreign_ledger, ERROR, ["contacts.sqlite", "another program", "--ledger"], id="ledger-of-another-program"),
    pytest.param(_damaged_ledger, ERROR, ["ledger.sqlite", "--ledger", "move this file away"], id="ledger-damaged-pages"),
    pytest.param(_newer_ledger, ERROR, ["ledger.sqlite", "schema version 99"], id="ledger-newer-schema"),
    pytest.param(lambda c: ["verify", c.out], ERROR, ["out", "is a folder"], id="verify-a-folder"),
    pytest.param(_ledger_not_sqlite, ERROR, ["recipe.yaml", "ledger"], id="history-ledger-not-sqlite"),
    pytest.param(_same_recipe_twice, ERROR, ["tiny", "more than once"], id="evaluate-same-recipe-twice"),
]


@pytest.mark.parametrize("build, expect, needles", CASES)
def test_bad_input(build, expect, needles, tmp_path, monkeypatch, run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    argv = build(ctx)
    result = run_cli(*argv)
    assert "Traceback" not in result.err and "Traceback" not in result.out
    assert "internal error" not in result.err, result.err
    if expect == ERROR:
        assert result.code == 2, result.err
        assert "error" in result.err
    elif expect == SKIP:
        assert result.code in (0, 1), result.err
        assert "warning" in result.err
    else:
        assert result.code in (0, 1), result.err
        assert "skipped" not in result.err, result.err
        assert (ctx.out / "sheet.png").is_file()
    for needle in needles:
        assert needle in result.err, f"{needle!r} not in stderr: {result.err}"


def test_largest_seed_runs_check(tmp_path, run_cli):
    # The largest seed --seed accepts reaches every seeded library call.
    from augplan.recipe.parse import MAX_SEED

    data = write_tiny_dataset(tmp_path / "DATA")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("name: tiny\ncopies: 1\ntransforms:\n  - op: flip\n", encoding="utf-8")
    result = run_cli("check", data, "--recipe", recipe, "--seed", MAX_SEED, "--sample", "3", "--quiet")
    assert result.code in (0, 1), result.err


@pytest.mark.parametrize("evidence", ["[1, 2]", "just words", "7"])
def test_verify_evidence_that_is_not_a_mapping_fails_plainly(evidence, tmp_path, run_cli):
    path = tmp_path / "vetted.yaml"
    path.write_text(f"name: v\ntransforms: []\nevidence: {evidence}\nchecksum: abc\n", encoding="utf-8")
    result = run_cli("verify", path)
    assert "Traceback" not in result.err and "internal error" not in result.err
    assert result.code == 1
    assert "must be a mapping" in result.out


def test_preview_over_the_recipe_leaves_the_recipe(tmp_path, run_cli):
    data = write_tiny_dataset(tmp_path / "DATA")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("name: tiny\ntransforms: []\n", encoding="utf-8")
    run_cli("preview", data, "--recipe", recipe, "-o", recipe)
    assert recipe.read_text(encoding="utf-8") == "name: tiny\ntransforms: []\n"


def test_foreign_sqlite_file_is_left_as_it_was(tmp_path, run_cli):
    import hashlib
    import sqlite3

    path = tmp_path / "contacts.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE people (name TEXT)")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    assert run_cli("history", "--ledger", path).code == 2
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_unwritable_cache_place_warns_and_evaluates(tmp_path, run_cli):
    # A file where the default .augplan/ folder would go stands in for read-only
    # storage beside the data: the run goes on without a disk cache.
    data = write_tiny_dataset(tmp_path / "DATA")
    (tmp_path / ".augplan").write_text("in the way\n")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("name: tiny\ncopies: 1\ntransforms:\n  - op: flip\n", encoding="utf-8")
    result = run_cli("evaluate", data, "--recipe", recipe, "--repeats", "1", "--json",
                     "--ledger", tmp_path / "elsewhere" / "ledger.sqlite")
    assert result.code in (0, 1), result.err
    assert ".augplan" in result.err and "--cache" in result.err
    assert (tmp_path / "elsewhere" / "ledger.sqlite").is_file()


def test_exif_orientation_is_applied_on_read(tmp_path):
    # A 24 x 16 (H x W) image tagged Orientation 6 displays as 16 x 24.
    from augplan.data import read_image

    exif = Image.Exif()
    exif[0x0112] = 6
    path = tmp_path / "rotated.jpg"
    Image.fromarray(np.zeros((24, 16, 3), np.uint8)).save(path, exif=exif.tobytes())
    assert read_image(path).shape == (16, 24, 3)


def test_verify_missing_file_is_bad_input(tmp_path, run_cli):
    result = run_cli("verify", tmp_path / "no-such-vetted.yaml")
    assert "Traceback" not in result.err
    assert result.code == 2
    assert "no-such-vetted.yaml" in result.err and "not found" in result.err


def test_verify_missing_file_never_passes(tmp_path, run_cli):
    # Whatever the exit code policy, a missing vetted file must not pass.
    result = run_cli("verify", tmp_path / "no-such-vetted.yaml")
    assert result.code != 0
    assert "Traceback" not in result.err
    assert "no-such-vetted.yaml" in result.out + result.err


@pytest.mark.parametrize("damage", [np.full(7, np.nan, np.float32), np.zeros(7, np.float32)],
                         ids=["all-nan", "wrong-length"])
def test_damaged_cache_entry_is_recomputed_with_a_warning(tmp_path, run_cli, damage):
    data = write_tiny_dataset(tmp_path / "DATA")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("name: tiny\ncopies: 1\ntransforms:\n  - op: flip\n", encoding="utf-8")
    argv = ["evaluate", data, "--recipe", recipe, "--repeats", "1", "--json", "--cache", tmp_path / "cache"]
    assert run_cli(*argv, "--ledger", tmp_path / "one.sqlite").code in (0, 1)
    entry = next((tmp_path / "cache").rglob("*.npy"))
    good = np.load(entry)
    np.save(entry, damage)
    result = run_cli(*argv, "--ledger", tmp_path / "two.sqlite")
    assert result.code in (0, 1), result.err
    assert "damaged feature-cache" in result.err
    assert np.array_equal(np.load(entry), good)  # recomputed and rewritten


@pytest.mark.parametrize("as_json", [False, True], ids=["table", "json"])
def test_coverage_runs_through_a_class_with_one_training_image(as_json, tmp_path, monkeypatch, run_cli):
    # The shortcut audit cannot cross-validate a one-image class; its scores are
    # None and every output must still be written (exit 0 or 1, never 3).
    ctx = Ctx(tmp_path, monkeypatch)
    _class_with_one_image(ctx)
    result = run_cli("coverage", ctx.data, "--recipe", ctx.recipe, "--quiet", *(["--json"] if as_json else []))
    assert result.code in (0, 1), result.err
    assert "internal error" not in result.err
    if as_json:
        assert json.loads(result.out)["recipe"] == "tiny"
    else:
        assert "tiny" in result.out


def test_duplicates_across_splits_are_listed_once_in_json_and_text(tmp_path, run_cli):
    import shutil

    data = write_tiny_dataset(tmp_path / "DATA")
    for n in range(4):  # four exact copies of training images in val
        shutil.copy(data / "train" / "alpha" / f"0{n}.png", data / "val" / "alpha" / f"copy-{n}.png")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("name: tiny\ncopies: 1\ntransforms:\n  - op: flip\n", encoding="utf-8")
    result = run_cli("check", data, "--recipe", recipe, "--sample", "3", "--json")
    assert result.code in (0, 1), result.err
    document = json.loads(result.out)
    assert len(document["leaks"]) == 4
    said = [line for line in result.err.splitlines() if "duplicate" in line]
    assert len(said) == 1 and "4 duplicate pairs across splits (4 exact)" in said[0] and "1 more" in said[0]
    assert [w for w in document["warnings"] if "duplicate" in w] == [said[0].removeprefix("warning: ")]


# --------------------------------------------------------------------------
# Third round: memory and size bounds, where outputs go, all or nothing,
# damaged streams, terminal safety, the team's own code


def test_a_large_image_is_decoded_at_the_analysis_side(tmp_path):
    # A 4000 x 4000 RGBA PNG read at 64 x 64 (as every analysis reads it): the
    # decoder's own full-size buffer is the only large one, not its copies.
    # Measured in a fresh process (ru_maxrss is a process's peak, in KiB on Linux).
    import subprocess
    import sys

    path = tmp_path / "large.png"
    gradient = np.linspace(0, 255, 4000, dtype=np.uint8)
    rgba = np.empty((4000, 4000, 4), np.uint8)
    rgba[..., 0] = gradient[None, :]
    rgba[..., 1] = gradient[:, None]
    rgba[..., 2] = 128
    rgba[..., 3] = 200
    Image.fromarray(rgba).save(path, compress_level=1)
    del rgba
    script = ("import resource, sys\n"
              "from augplan.data import load_images\n"
              "before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
              "batch = load_images([sys.argv[1]], 64)\n"
              "after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
              "print(batch.shape, after - before)\n")
    done = subprocess.run([sys.executable, "-c", script, str(path)], capture_output=True, text=True, check=True)
    shape, growth = done.stdout.rsplit(")", 1)
    assert shape.strip() == "(1, 64, 64, 3"
    # 4000 x 4000 x 4 bytes is 62.5 MiB; before decoding at the analysis side the
    # copies (orientation, conversion, 16-bit compositing) took over 400 MiB.
    assert int(growth) < 160 * 1024, f"peak grew by {int(growth) // 1024} MiB"


def test_an_image_over_the_pixel_bound_is_listed_and_skipped(tmp_path, monkeypatch, run_cli):
    import augplan.data.decoding as decoding_module

    ctx = Ctx(tmp_path, monkeypatch)
    monkeypatch.setattr(decoding_module, "MAX_IMAGE_PIXELS", 30 * 30)
    ctx.image("train/alpha/big.png", np.full((40, 40, 3), 90, np.uint8))
    result = run_cli(*ctx.preview())
    assert result.code == 0, result.err
    assert "big.png" in result.err and "1600 pixels" in result.err and "at most 900" in result.err


def _damaged_stream_png(path):
    # Chunks intact (their CRCs recomputed), the compressed pixel stream damaged.
    noise = np.random.default_rng(3).integers(0, 256, (16, 16, 3), dtype=np.uint8)
    buffer = io.BytesIO()
    Image.fromarray(noise).save(buffer, format="PNG")
    data = buffer.getvalue()
    start = data.index(b"IDAT") - 4
    length = struct.unpack(">I", data[start:start + 4])[0]
    payload = bytearray(data[start + 8:start + 8 + length])
    payload[2:] = bytes(b ^ 0x5A for b in payload[2:])
    path.write_bytes(data[:start] + _png_chunk(b"IDAT", bytes(payload)) + data[start + 12 + length:])


@pytest.mark.parametrize("strict", [False, True], ids=["listed-and-skipped", "strict-error"])
def test_a_damaged_compressed_stream_follows_the_skip_rule(strict, tmp_path, monkeypatch, run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    _damaged_stream_png(ctx.data / "train" / "alpha" / "stream.png")
    result = run_cli(*ctx.preview(*(["--strict"] if strict else [])))
    assert "Traceback" not in result.err
    assert result.code == (2 if strict else 0), result.err
    assert "stream.png" in result.err and ("error" if strict else "warning: skipped") in result.err


def test_a_recipe_of_too_many_steps_is_refused_by_schema_and_reader(tmp_path, monkeypatch, run_cli):
    from augplan.recipe.parse import MAX_TRANSFORMS, RECIPE_SCHEMA_PATH

    assert json.loads(RECIPE_SCHEMA_PATH.read_text())["properties"]["transforms"]["maxItems"] == MAX_TRANSFORMS
    ctx = Ctx(tmp_path, monkeypatch)
    steps = "".join("  - op: flip\n" for _ in range(MAX_TRANSFORMS + 1))
    result = run_cli(*ctx.recipe_text(f"name: long\ntransforms:\n{steps}"))
    assert result.code == 2, result.err
    assert "bad.yaml" in result.err and f"at most {MAX_TRANSFORMS}" in result.err and str(MAX_TRANSFORMS + 1) in result.err


def _count_option(command, option, value):
    def build(ctx):
        extra = ["-o", ctx.tmp / "vetted"] if command == "vet" else []
        extra = ["-o", ctx.out / "sheet.png"] if command == "preview" else extra
        return [command, ctx.data, "--recipe", ctx.recipe, *extra, option, value]
    return build


COUNT_OPTIONS = [("preview", "--draws"), ("preview", "--per-class"), ("check", "--sample"),
                 ("evaluate", "--repeats"), ("vet", "--repeats"), ("vet", "--sample"), ("check", "--workers")]


@pytest.mark.parametrize("command, option", COUNT_OPTIONS, ids=[f"{c}{o}" for c, o in COUNT_OPTIONS])
def test_every_count_option_is_bounded(command, option, tmp_path, monkeypatch, run_cli):
    from augplan.cli import COUNT_BOUNDS
    from augplan.parallel import MAX_WORKERS

    ctx = Ctx(tmp_path, monkeypatch)
    bound = {**COUNT_BOUNDS, "--workers": MAX_WORKERS}[option]
    result = run_cli(*_count_option(command, option, str(bound + 1))(ctx))
    assert result.code == 2, result.err
    assert option in result.err and f"at most {bound}" in result.err and str(bound + 1) in result.err
    assert "internal error" not in result.err


def test_coverage_of_many_classes_of_two_images_says_too_few_at_once(tmp_path, run_cli):
    # 120 classes of 2 training images: the shortcut audit's work grew with the
    # square of the classes (minutes); with too few images it says so instead.
    classes = tuple(f"c{i:03d}" for i in range(120))
    data = write_tiny_dataset(tmp_path / "DATA", classes=classes, train=2, val=1, side=8)
    recipe = tmp_path / "r.yaml"
    recipe.write_text("name: r\ncopies: 1\ntransforms: []\n", encoding="utf-8")
    result = run_cli("coverage", data, "--recipe", recipe, "--json", "--quiet")
    assert result.code in (0, 1), result.err
    document = json.loads(result.out)
    assert any("too few training images" in message.lower() for message in document["messages"])
    assert all(row["original"] is None for row in document["shortcuts"])


@pytest.mark.parametrize("run", [str(2**63), str(10**30)], ids=["2-to-the-63", "10-to-the-30"])
def test_history_of_a_huge_run_number_is_bad_input(run, tmp_path, run_cli):
    from augplan.evaluate.ledger import _connect

    ledger = tmp_path / "ledger.sqlite"
    _connect(ledger, create=True).close()
    result = run_cli("history", run, "--ledger", ledger)
    assert result.code == 2, result.err
    assert "internal error" not in result.err and run in result.err


def test_history_never_writes_the_ledger(tmp_path, run_cli):
    ledger = tmp_path / "empty.sqlite"
    ledger.write_bytes(b"")
    before = ledger.stat()
    result = run_cli("history", "--ledger", ledger)
    assert result.code == 0, result.err
    assert ledger.read_bytes() == b"" and ledger.stat().st_mtime_ns == before.st_mtime_ns
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty.sqlite"]  # no journal either
    result = run_cli("history", "1", "--ledger", ledger)
    assert result.code == 2 and "no results ledger here" in result.err, result.err
    assert ledger.read_bytes() == b""


def test_an_output_that_is_a_device_is_refused():
    # Never written: the check runs before any output is opened.
    from augplan.atomic import check_output
    from augplan.errors import BadInputError

    with pytest.raises(BadInputError, match="a device, not a regular file"):
        check_output("/dev/null")


@pytest.mark.parametrize("command", ["preview", "draft"])
def test_an_output_that_is_a_fifo_is_left_a_fifo(command, tmp_path, monkeypatch, run_cli):
    import stat

    ctx = Ctx(tmp_path, monkeypatch)
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    argv = ctx.preview() if command == "preview" else ["draft", ctx.data, "-o", fifo, "--quiet"]
    if command == "preview":
        argv[argv.index("-o") + 1] = fifo
    result = run_cli(*argv)
    assert result.code == 2, result.err
    assert "pipe" in result.err and "FIFO" in result.err
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def _field_folder(ctx):
    field = ctx.tmp / "FIELD"
    (field / "alpha").mkdir(parents=True)
    Image.fromarray(draw_tiny_image(0, np.random.default_rng(5))).save(field / "alpha" / "f.png")
    return field


def test_draft_never_writes_inside_the_field_folder(tmp_path, monkeypatch, run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    field = _field_folder(ctx)
    target = field / "alpha" / "f.png"
    before = target.read_bytes()
    result = run_cli("draft", ctx.data, "--field", field, "-o", target, "--quiet")
    assert result.code == 2, result.err
    assert "inside the field folder" in result.err
    assert target.read_bytes() == before


def test_coverage_plots_never_go_inside_the_field_folder(tmp_path, monkeypatch, run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    field = _field_folder(ctx)
    result = run_cli("coverage", ctx.data, "--recipe", ctx.recipe, "--field", field, "--plots", field / "plots",
                     "--quiet")
    assert result.code == 2, result.err
    assert "inside the field folder" in result.err
    assert not (field / "plots").exists()


def test_evidence_on_a_full_disk_leaves_no_partial_folder(tmp_path, monkeypatch, run_cli):
    import errno

    import augplan.atomic

    ctx = Ctx(tmp_path, monkeypatch)
    recipe = ctx.tmp / "two.yaml"
    recipe.write_text("name: two\ncopies: 1\ntransforms:\n  - op: rotate\n    degrees: 90\n"
                      "  - op: hue\n    degrees: [-180, 180]\n", encoding="utf-8")
    real_fsync, calls = os.fsync, []

    def fsync(descriptor):  # room for one evidence sheet, not two
        calls.append(descriptor)
        if len(calls) == 2:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_fsync(descriptor)

    monkeypatch.setattr(augplan.atomic.os, "fsync", fsync)
    evidence = ctx.out / "evidence"
    result = run_cli("check", ctx.data, "--recipe", recipe, "--evidence", evidence, "--sample", "3", "--quiet")
    assert result.code == 2, result.err
    assert "No space left on device" in result.err and str(evidence) in result.err
    assert len(calls) == 2
    assert sorted(p.name for p in ctx.out.iterdir()) == []  # neither the folder nor a temporary


def test_read_only_storage_names_the_output_not_a_temporary(tmp_path, monkeypatch, run_cli):
    import errno

    ctx = Ctx(tmp_path, monkeypatch)
    real_mkdir, real_open = os.mkdir, os.open
    place = ctx.tmp / "readonly"
    place.mkdir()

    def refuse(path, *args, **kwargs):
        if Path(path).parent == place:
            raise OSError(errno.EROFS, "Read-only file system", str(path))
        return None

    monkeypatch.setattr(os, "mkdir", lambda path, *a, **k: refuse(path) or real_mkdir(path, *a, **k))
    monkeypatch.setattr(os, "open", lambda path, *a, **k: refuse(path) or real_open(path, *a, **k))
    result = run_cli("vet", ctx.data, "--recipe", ctx.recipe, "-o", place / "report", "--repeats", "1",
                     "--sample", "3", "--quiet")
    assert result.code == 2, result.err
    assert "Read-only file system" in result.err
    assert f"{place / 'report'}:" in result.err and ".tmp" not in result.err and "/." not in result.err


def test_temporary_names_fit_where_the_output_name_fits(tmp_path, monkeypatch, run_cli):
    # A 250-byte name is legal (NAME_MAX is 255); ".<name>.XXXXXXXX.tmp" is not.
    ctx = Ctx(tmp_path, monkeypatch)
    long_file = ctx.out / ("d" * 245 + ".yaml")
    result = run_cli("draft", ctx.data, "-o", long_file, "--quiet")
    assert result.code == 0, result.err
    assert long_file.is_file()

    from augplan.atomic import publish_folder

    long_folder = ctx.out / ("v" * 250)
    publish_folder({"report.html": b"<html></html>\n"}, long_folder)
    assert (long_folder / "report.html").read_bytes() == b"<html></html>\n"
    assert sorted(p.name for p in ctx.out.iterdir()) == sorted([long_file.name, long_folder.name])


def test_output_folders_follow_the_users_umask(tmp_path, monkeypatch, run_cli):
    # A shared team reads the report: the folder gets 0777 & ~umask, as mkdir gives.
    ctx = Ctx(tmp_path, monkeypatch)
    previous = os.umask(0o022)
    try:
        out = ctx.tmp / "vetted"
        result = run_cli("vet", ctx.data, "--recipe", ctx.recipe, "-o", out, "--repeats", "1", "--sample", "3",
                         "--quiet")
    finally:
        os.umask(previous)
    assert result.code in (0, 1), result.err
    assert (out.stat().st_mode & 0o777) == 0o755
    assert ((out / "report.html").stat().st_mode & 0o777) == 0o644


def test_a_second_vet_to_the_same_output_is_refused_while_the_first_runs(tmp_path, monkeypatch, run_cli):
    from augplan.atomic import output_lock

    ctx = Ctx(tmp_path, monkeypatch)
    out = ctx.tmp / "vetted"
    with output_lock(out):  # the first run holds the folder
        result = run_cli("vet", ctx.data, "--recipe", ctx.recipe, "-o", out, "--repeats", "1", "--sample", "3",
                         "--quiet")
    assert result.code == 2, result.err
    assert "another augplan run" in result.err and f"process {os.getpid()}" in result.err
    assert not out.exists()
    assert not [p.name for p in ctx.tmp.iterdir() if p.name.startswith(".vetted")]  # the lock is gone too


def test_escape_sequences_in_names_never_reach_the_terminal(tmp_path, monkeypatch, run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    (ctx.data / "train" / "alpha" / "evil\x1b[2J\x1b]0;owned\x07.png").write_bytes(b"not an image")
    result = run_cli(*ctx.preview())
    assert result.code == 0, result.err
    assert "evil" in result.err and "\x1b" not in result.err and "\x07" not in result.err
    assert "\\x1b[2J" in result.err
    result = run_cli("check", ctx.data, "--recipe", ctx.tmp / "no\x1b[31mrecipe.yaml")
    assert result.code == 2 and "\x1b" not in result.err and "no\\x1b[31mrecipe.yaml" in result.err


def test_load_recipe_refuses_a_class_list_of_another_vetting(tmp_path):
    import augplan
    from augplan.recipe.parse import read_recipe
    from augplan.vet.vetted_file import vetted_text

    plain = tmp_path / "plain.yaml"
    plain.write_text("name: v\ntransforms:\n  - op: flip\n    only: [a]\n", encoding="utf-8")
    vetted = tmp_path / "vetted.yaml"
    vetted.write_text(vetted_text(read_recipe(plain), {"classes": ["a", "b", "c"]}), encoding="utf-8")
    with pytest.raises(ValueError, match="3 classes"):
        augplan.load_recipe(vetted, classes=["a", "b"])
    with pytest.raises(ValueError, match="'d'"):
        augplan.load_recipe(vetted, classes=["a", "b", "d"])
    assert augplan.load_recipe(vetted, classes=["c", "b", "a"]).classes == ("c", "b", "a")


@pytest.mark.parametrize("label", [0.5, float("nan"), np.float32(1.0), True], ids=["half", "nan", "float32", "bool"])
def test_a_class_scoped_recipe_refuses_a_label_that_is_no_index(label, tmp_path):
    import augplan

    path = tmp_path / "scoped.yaml"
    path.write_text("name: v\ntransforms:\n  - op: flip\n    only: [a]\n", encoding="utf-8")
    aug = augplan.load_recipe(path, classes=["a", "b"])
    with pytest.raises(ValueError, match="integer class index"):
        aug.apply(np.zeros((4, 4, 3), np.uint8), label, np.random.default_rng(0))


@pytest.mark.parametrize("function, needle", [("raises", "ZeroDivisionError"), ("exits", "SystemExit")])
@pytest.mark.parametrize("with_traceback", [False, True], ids=["plain", "traceback"])
def test_the_teams_failing_function_is_named_with_exit_2(function, needle, with_traceback, tmp_path, monkeypatch,
                                                         run_cli):
    ctx = Ctx(tmp_path, monkeypatch)
    extra = ["--traceback"] if with_traceback else []
    result = run_cli("evaluate", ctx.data, "--recipe", ctx.recipe, "--repeats", "1", "--quiet",
                     "--ledger", ctx.tmp / "l.sqlite", "--model", f"team_training:{function}", *extra)
    assert result.code == 2, result.err
    assert f"team_training:{function}" in result.err and needle in result.err
    assert "internal error" not in result.err
    assert ("Traceback" in result.err) == with_traceback
    if with_traceback:
        assert "team_training.py" in result.err


def test_a_reduced_large_image_matches_pillows_full_size_resize(tmp_path):
    # Past REDUCE_ABOVE_PIXELS an image is block-averaged right after decoding; the
    # result is Pillow's own full-size path (orientation applied, box resize) up to
    # where the block edges fall: on ramps of 255 levels over 2100 pixels, a block
    # edge moved by up to half an output pixel (~16 source pixels) shifts a mean
    # by under 2 levels; 4 allows for rounding at both stages.
    from PIL import ImageOps

    from augplan.data.decoding import REDUCE_ABOVE_PIXELS, load_images

    side = 2100
    assert side * side > REDUCE_ABOVE_PIXELS
    ramp = np.linspace(0, 255, side)
    rgb = np.stack([np.broadcast_to(ramp[None, :], (side, side)), np.broadcast_to(ramp[:, None], (side, side)),
                    np.full((side, side), 90.0)], axis=-1).astype(np.uint8)
    image = Image.fromarray(rgb)
    exif = image.getexif()
    exif[0x0112] = 6  # EXIF orientation: turn a quarter clockwise to display
    path = tmp_path / "large.png"
    image.save(path, exif=exif.tobytes(), compress_level=1)
    ours = load_images([path], 64)[0].astype(int)
    with Image.open(path) as opened:
        reference = np.asarray(ImageOps.exif_transpose(opened).convert("RGB").resize((64, 64), Image.Resampling.BOX))
    assert np.abs(ours - reference.astype(int)).max() <= 4
