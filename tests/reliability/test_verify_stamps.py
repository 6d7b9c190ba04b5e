"""Release files proved unchanged by their stamps are not hashed again; any write is still
found, even one that puts the modification time back."""

from __future__ import annotations

import os

from pipeline.verify import file_stamp, verify_release_manifests
from tests.reliability.test_verify import write_release

CSV = b"fluid,Tc_K\nargon,150.687\n"


def _stamped(tmp_path):
    root = tmp_path / "curated"
    write_release(root, "2026.1", {"constants.csv": CSV, "curves.csv": b"a,b\n1,2\n"})
    intact: dict = {}
    findings, _, hashed = verify_release_manifests(root, intact=intact)
    assert findings == [] and hashed == 2 and len(intact) == 2
    return root, intact


def test_a_file_whose_stamp_is_recorded_is_not_hashed_again(tmp_path):
    """With the stamps of a first verify, a second verify of the untouched release hashes
    nothing and still reports every file intact."""
    root, intact = _stamped(tmp_path)
    again: dict = {}
    findings, releases, hashed = verify_release_manifests(root, stamps=intact, intact=again)
    assert (findings, releases, hashed) == ([], ["2026.1"], 0)
    assert again == intact


def test_a_write_that_restores_size_and_mtime_is_still_found(tmp_path):
    """A changed digit of the same length, with the modification time set back, moves the
    status-change time: the stamp no longer matches, the file is hashed and found."""
    root, intact = _stamped(tmp_path)
    path = root / "2026.1" / "constants.csv"
    st = os.stat(path)
    path.write_bytes(CSV.replace(b"150.687", b"150.786"))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert file_stamp(path, "x")[1:5] == [st.st_size, st.st_dev, st.st_ino, st.st_mtime_ns]
    findings, _, hashed = verify_release_manifests(root, stamps=intact)
    assert hashed == 1 and [f.rule for f in findings] == ["release.hash"]
    assert "2026.1/constants.csv" in findings[0].message


def test_a_stamp_with_another_digest_proves_nothing(tmp_path):
    """A stamp recorded for other content (the manifest now lists another SHA-256) does not
    let a file through: it is hashed against the manifest."""
    root, intact = _stamped(tmp_path)
    key = str((root / "2026.1" / "constants.csv").resolve())
    forged = {**intact, key: ["0" * 64, *intact[key][1:]]}
    findings, _, hashed = verify_release_manifests(root, stamps=forged)
    assert findings == [] and hashed == 1
