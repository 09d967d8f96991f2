"""Tests for augplan.data.records: the fingerprint."""

from augplan.data import (
    fingerprint,
    open_dataset,
)
from image_files import make_layout as _make_layout, save_image as _save, solid as _solid


def test_fingerprint_tracks_bytes_not_order(tmp_path):
    _make_layout(tmp_path)
    bmp = _save(tmp_path / "train" / "ok" / "z.bmp", _solid((40, 40, 40)), "BMP")
    dataset = open_dataset(tmp_path)
    before = fingerprint(dataset)
    assert len(before) == 64 and int(before, 16) >= 0
    shuffled = type(dataset)(**{**dataset.__dict__, "records": dataset.records[::-1]})
    assert fingerprint(shuffled) == before
    data = bytearray(bmp.read_bytes())
    data[-1] ^= 1  # one pixel byte of an uncompressed BMP
    bmp.write_bytes(bytes(data))
    changed = open_dataset(tmp_path)
    assert fingerprint(changed) != before
    # Outside reference: hashlib's sha256 of the file bytes is what each record carries.
    import hashlib
    record = next(r for r in changed.records if r.relpath == "train/ok/z.bmp")
    assert record.sha256 == hashlib.sha256(bmp.read_bytes()).hexdigest()
