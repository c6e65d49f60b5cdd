"""The checksummed ``.npz`` container (fractalseq.io._npz) against crafted, hostile files.

Every crafted file is built here with the standard library's ``zipfile`` and
numpy's own ``.npy`` writer (``numpy.lib.format.write_array``), the reference
implementations of the ZIP and NPY formats; checksums are stdlib ``hashlib``
SHA-256.  Each refusal must be one sentence; for the zip bomb and the huge
declared sizes the read runs in a child interpreter whose peak resident memory
(``VmHWM`` of ``/proc/self/status``, kilobytes) must stay far below the declared
size.  ``ru_maxrss`` is not used: Linux carries a process's peak across
``execve``, so a child of a large test process would report its parent's peak.
"""

from __future__ import annotations

import hashlib
import io
import json
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest

from fractalseq.errors import ModelFileError
from fractalseq.io import read_container, write_container

ROOT = Path(__file__).resolve().parents[1]
KIND = "fractalseq-test"
GiB = 1 << 30
#: peak memory allowed for refusing a file that declares or hides >= 1 GiB
PEAK_LIMIT_KB = 300 * 1024


# ------------------------------------------------------------------ crafting helpers
def npy_bytes(a: np.ndarray, allow_pickle: bool = False) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, a, allow_pickle=allow_pickle)
    return buf.getvalue()


def npy_header_only(descr: str, shape: tuple) -> bytes:
    """A version-1.0 ``.npy`` header (numpy's own writer) declaring ``descr`` and ``shape``, with no data."""
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": descr, "fortran_order": False, "shape": shape})
    return buf.getvalue()


def sha(a: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(a).tobytes()).hexdigest()


def header_bytes(header: dict) -> bytes:
    return npy_bytes(np.frombuffer(json.dumps(header).encode(), np.uint8))


def craft(path: Path, header: dict | None, members: dict[str, bytes]) -> Path:
    """A ZIP with ``header.npy`` (if given) and raw ``members`` (name -> member bytes)."""
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        if header is not None:
            zf.writestr("header.npy", header_bytes(header))
        for name, data in members.items():
            zf.writestr(name, data)
    return path


def good_parts() -> tuple[dict, dict[str, np.ndarray]]:
    arrays = {"cells": np.arange(10, dtype=np.uint64) * 7, "counts": np.arange(20, dtype=np.uint32).reshape(10, 2)}
    header = {
        "format": KIND, "version": 1,
        "sha256": {k: sha(v) for k, v in arrays.items()},
        "arrays": {k: {"dtype": v.dtype.str, "shape": list(v.shape)} for k, v in arrays.items()},
    }
    return header, arrays


def craft_good(path: Path, **header_changes) -> Path:
    header, arrays = good_parts()
    header.update(header_changes)
    return craft(path, header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()})


def one_sentence(message: str, path: Path) -> None:
    """The refusal is one sentence: one line, ends with a full stop, no sentence break inside."""
    text = message.replace(str(path), "PATH")
    assert "\n" not in text and text.endswith("."), message
    assert ". " not in text[:-1], message


def refused(path: Path, *, max_bytes: int = 1 << 30, **kw) -> str:
    with pytest.raises(ModelFileError) as err:
        read_container(path, KIND, max_bytes=max_bytes, **kw)
    one_sentence(str(err.value), path)
    return str(err.value)


_CHILD = r"""
import json, sys
from fractalseq.errors import ModelFileError
from fractalseq.io._npz import read_container
try:
    read_container(sys.argv[1], sys.argv[2], max_bytes=int(sys.argv[3]))
    out = {"error": None}
except ModelFileError as exc:
    out = {"error": str(exc)}
with open("/proc/self/status") as status:  # peak resident set of this process image only
    out["maxrss_kb"] = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
print(json.dumps(out))
"""


def read_in_child(path: Path, max_bytes: int) -> dict:
    """Read ``path`` in a fresh interpreter; its refusal and peak resident memory (kB)."""
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin", "NUMBA_DISABLE_JIT": "0"}
    done = subprocess.run([sys.executable, "-c", _CHILD, str(path), KIND, str(max_bytes)],
                          capture_output=True, text=True, env=env, check=True)
    return json.loads(done.stdout)


@pytest.fixture(scope="module")
def bomb_zip(tmp_path_factory) -> tuple[Path, str]:
    """A valid small container plus ``bomb.npy``: 1 GiB of zeros streamed through deflate (about 1 MB).

    Returns the file (header not yet added) and the SHA-256 of the bomb's data.
    """
    path = tmp_path_factory.mktemp("bomb") / "base.zip"
    header, arrays = good_parts()
    chunk = bytes(16 << 20)
    digest = hashlib.sha256()
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for k, v in arrays.items():
            zf.writestr(f"{k}.npy", npy_bytes(v))
        with zf.open("bomb.npy", "w", force_zip64=True) as fh:
            fh.write(npy_header_only("|u1", (GiB,)))
            for _ in range(GiB // len(chunk)):
                fh.write(chunk)
                digest.update(chunk)
    assert path.stat().st_size < 8 << 20  # the bomb really is small on disk
    return path, digest.hexdigest()


def with_header(base: Path, out: Path, header: dict) -> Path:
    out.write_bytes(base.read_bytes())
    with zipfile.ZipFile(out, "a", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("header.npy", header_bytes(header))
    return out


# ------------------------------------------------------------------ round trip
def test_round_trip_every_numeric_dtype_and_shape(tmp_path):
    rng = np.random.default_rng(7)
    arrays = {
        "u1": rng.integers(0, 255, 100, dtype=np.uint8),
        "u8": rng.integers(0, 2**63, (17, 3), dtype=np.uint64),
        "i8": rng.integers(-(2**40), 2**40, 50),
        "f8": rng.normal(size=(4, 5, 6)),
        "b": rng.random(33) < 0.5,
        "c16": rng.normal(size=3) + 1j,
        "empty": np.zeros((0, 4), np.uint32),
        "scalar": np.array(3.5),
        "fortran": np.asfortranarray(rng.normal(size=(3, 4))),
    }
    header = {"format": KIND, "version": 1, "alphabet": {"symbols": ["A", "C"]}, "note": "é"}
    p = write_container(tmp_path / "x.npz", header, arrays)
    got_header, got = read_container(p, KIND, max_bytes=1 << 20)
    assert got_header["alphabet"] == header["alphabet"] and got_header["note"] == "é"
    assert set(got) == set(arrays)
    # numpy's own reader (the reference for the npz layout) sees the same arrays
    with np.load(p, allow_pickle=False) as ref:
        assert sorted(ref.files) == sorted([*arrays, "header"])
        for k, v in arrays.items():
            assert got[k].dtype == v.dtype and got[k].shape == v.shape
            np.testing.assert_array_equal(got[k], v)
            np.testing.assert_array_equal(ref[k], v)
            assert got_header["sha256"][k] == hashlib.sha256(np.ascontiguousarray(v).tobytes()).hexdigest()
    # same content, same bytes (fixed member times)
    q = write_container(tmp_path / "y.npz", header, arrays)
    assert p.read_bytes() == q.read_bytes()
    # atomic writer: no overwrite without force
    from fractalseq.errors import OutputError
    with pytest.raises(OutputError):
        write_container(p, header, arrays)
    write_container(p, header, arrays, force=True)


def test_write_refuses_object_arrays_and_bad_names(tmp_path):
    with pytest.raises(ValueError):
        write_container(tmp_path / "o.npz", {"format": KIND, "version": 1}, {"a": np.array([{}, 1], dtype=object)})
    with pytest.raises(ValueError):
        write_container(tmp_path / "n.npz", {"format": KIND, "version": 1}, {"../a": np.zeros(2)})
    with pytest.raises(ValueError):
        write_container(tmp_path / "h.npz", {"format": KIND, "version": 1}, {"header": np.zeros(2)})
    assert not list(tmp_path.iterdir())


def test_reads_the_count_and_model_files_written_today(tmp_path, lambda_fasta):
    """Files of the current writers (np.savez_compressed, no 'arrays' section) read unchanged."""
    from fractalseq.predict._predictor import CellPredictor
    from fractalseq.sources import open_source
    from fractalseq.words._counts import WordCounts, count_words

    counts = count_words(open_source(lambda_fasta), 10)
    # a count file as the writer before the container made it: np.savez_compressed, no 'arrays' section
    legacy_header, legacy_arrays = counts.to_arrays()
    cpath = tmp_path / "c.npz"
    np.savez_compressed(cpath, header=np.frombuffer(json.dumps(legacy_header, sort_keys=True).encode(), np.uint8),
                        **legacy_arrays)
    header, arrays = read_container(cpath, "fractalseq-words", max_bytes=1 << 30)
    assert header["depth"] == 10 and "arrays" not in header
    assert WordCounts.load(counts.save(tmp_path / "c2.npz")).words(6)[1].tolist() == counts.words(6)[1].tolist()
    with np.load(cpath, allow_pickle=False) as ref:
        assert sorted(ref.files) == sorted([*arrays, "header"])
        for k in arrays:
            np.testing.assert_array_equal(arrays[k], ref[k])
            assert arrays[k].dtype == ref[k].dtype
    back = WordCounts.from_arrays({**arrays, "header": np.frombuffer(json.dumps(header).encode(), np.uint8)})
    np.testing.assert_array_equal(back.words(6)[1], counts.words(6)[1])

    model = CellPredictor(max_depth=8).fit(open_source(lambda_fasta))
    mpath = model.save(tmp_path / "m.npz")
    header, arrays = read_container(mpath, "fractalseq-model", max_bytes=1 << 30, expected_version=2)
    assert sorted(arrays) == sorted(header["sha256"])
    assert {a.dtype.str for k, a in arrays.items() if k.startswith("words_")} == {"<u8"}
    assert {a.dtype.str for k, a in arrays.items() if k.startswith("counts_")} == {"<u4"}
    # a count file read as a model file is refused by kind
    assert "is a 'fractalseq-words' file, not a fractalseq-model file" in refused_as(cpath, "fractalseq-model")


def refused_as(path: Path, kind: str) -> str:
    with pytest.raises(ModelFileError) as err:
        read_container(path, kind, max_bytes=1 << 30)
    one_sentence(str(err.value), path)
    return str(err.value)


# ------------------------------------------------------------------ sizes: bombs and huge shapes
def test_unlisted_zip_bomb_is_refused_without_decompressing(tmp_path, bomb_zip):
    base, _ = bomb_zip
    header, _ = good_parts()
    path = with_header(base, tmp_path / "unlisted.npz", header)
    out = read_in_child(path, max_bytes=GiB * 4)
    assert out["error"] and "'bomb.npy'" in out["error"] and "does not list" in out["error"]
    one_sentence(out["error"], path)
    assert out["maxrss_kb"] < PEAK_LIMIT_KB, out


def test_listed_bomb_over_the_size_cap_is_refused_before_reading(tmp_path, bomb_zip):
    base, bomb_digest = bomb_zip
    header, _ = good_parts()
    header["sha256"]["bomb"] = bomb_digest
    header["arrays"]["bomb"] = {"dtype": "|u1", "shape": [GiB]}
    path = with_header(base, tmp_path / "listed.npz", header)
    out = read_in_child(path, max_bytes=256 << 20)
    assert out["error"] and "more than 268435456 bytes" in out["error"]
    one_sentence(out["error"], path)
    assert out["maxrss_kb"] < PEAK_LIMIT_KB, out


def test_huge_shape_in_npy_header_is_refused(tmp_path):
    # the member says 10^12 float64 (8 TB); the ZIP entry holds only the header
    header, arrays = good_parts()
    header["sha256"]["huge"] = "0" * 64
    del header["arrays"]
    members = {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}
    members["huge.npy"] = npy_header_only("<f8", (10**12,))
    path = craft(tmp_path / "huge.npz", header, members)
    msg = refused(path, max_bytes=1 << 62)
    assert "'huge'" in msg and "8000000000000 bytes" in msg
    out = read_in_child(path, max_bytes=1 << 62)
    assert out["error"] == msg
    assert out["maxrss_kb"] < PEAK_LIMIT_KB, out


def test_huge_shape_in_json_header_is_refused(tmp_path):
    header, arrays = good_parts()
    header["arrays"]["cells"]["shape"] = [10**15]
    path = craft(tmp_path / "huge.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()})
    msg = refused(path)
    assert "'cells'" in msg and "[1000000000000000]" in msg
    out = read_in_child(path, max_bytes=1 << 30)
    assert out["error"] == msg and out["maxrss_kb"] < PEAK_LIMIT_KB


# ------------------------------------------------------------------ dtypes, shapes, checksums
def test_object_dtype_is_refused(tmp_path):
    header, arrays = good_parts()
    obj = np.array([{"x": 1}, "y"], dtype=object)
    del header["arrays"]
    header["sha256"]["obj"] = "1" * 64
    members = {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}
    members["obj.npy"] = npy_bytes(obj, allow_pickle=True)
    msg = refused(craft(tmp_path / "obj.npz", header, members))
    assert "'obj'" in msg and "not a plain number type" in msg


@pytest.mark.parametrize("descr", ["<U4", "|S3", "|V8", "<M8[s]"])
def test_text_void_and_time_dtypes_are_refused(tmp_path, descr):
    header, arrays = good_parts()
    a = np.zeros(3, dtype=np.dtype(descr))
    arrays["odd"] = a
    header["sha256"]["odd"] = sha(a)
    del header["arrays"]
    msg = refused(craft(tmp_path / "odd.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "'odd'" in msg and "not a plain number type" in msg


def test_structured_dtype_is_refused(tmp_path):
    header, arrays = good_parts()
    a = np.zeros(3, dtype=[("a", "<u4"), ("b", "<f8")])
    header["sha256"]["rec"] = sha(a)
    del header["arrays"]
    members = {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}
    members["rec.npy"] = npy_bytes(a)
    msg = refused(craft(tmp_path / "rec.npz", header, members))
    assert "'rec'" in msg and "not a plain number type" in msg


def test_wrong_dtype_against_the_header_is_refused(tmp_path):
    header, arrays = good_parts()
    arrays["cells"] = arrays["cells"].astype(np.float64)  # same size in bytes, other type
    header["sha256"]["cells"] = sha(arrays["cells"])
    msg = refused(craft(tmp_path / "dt.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "'cells'" in msg and "<f8" in msg and "<u8" in msg


def test_shape_mismatch_against_the_header_is_refused(tmp_path):
    header, arrays = good_parts()
    arrays["counts"] = arrays["counts"].reshape(5, 4)
    msg = refused(craft(tmp_path / "sh.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "'counts'" in msg and "[5, 4]" in msg and "[10, 2]" in msg


def test_npy_header_disagreeing_with_zip_entry_size_is_refused(tmp_path):
    header, arrays = good_parts()
    data = npy_bytes(arrays["cells"])
    members = {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}
    members["cells.npy"] = data + b"\0" * 8  # one more element than declared
    msg = refused(craft(tmp_path / "sz.npz", header, members))
    assert "'cells'" in msg and "80 bytes" in msg and "88" in msg


def test_checksum_mismatch_is_refused(tmp_path):
    header, arrays = good_parts()
    header["sha256"]["counts"] = hashlib.sha256(b"something else").hexdigest()
    msg = refused(craft(tmp_path / "ck.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "'counts'" in msg and "checksum" in msg


def test_flipped_compressed_byte_is_refused(tmp_path):
    path = write_container(tmp_path / "ok.npz", {"format": KIND, "version": 1},
                           {"a": np.random.default_rng(3).integers(0, 2**60, 5000, dtype=np.uint64)})
    raw = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as zf:
        info = zf.getinfo("a.npy")
    # the middle of the member's compressed data (after its 30-byte local header, name and extra field)
    spot = info.header_offset + 30 + len(info.filename) + 20 + info.compress_size // 2
    raw[spot] ^= 0xFF
    bad = tmp_path / "flip.npz"
    bad.write_bytes(bytes(raw))
    msg = refused(bad)
    assert "damaged" in msg or "checksum" in msg


# ------------------------------------------------------------------ members
def test_missing_member_is_refused(tmp_path):
    header, arrays = good_parts()
    msg = refused(craft(tmp_path / "miss.npz", header, {"cells.npy": npy_bytes(arrays["cells"])}))
    assert "lacks the array 'counts'" in msg


def test_no_header_is_refused(tmp_path):
    _, arrays = good_parts()
    msg = refused(craft(tmp_path / "nohead.npz", None, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "no header" in msg


def test_duplicate_member_is_refused(tmp_path):
    header, arrays = good_parts()
    path = craft_good(tmp_path / "dup.npz")
    with pytest.warns(UserWarning):  # zipfile itself warns about the duplicate name
        with zipfile.ZipFile(path, "a") as zf:
            zf.writestr("cells.npy", npy_bytes(np.zeros(10, np.uint64)))
    assert "two members with the same name" in refused(path)


# ------------------------------------------------------------------ impossible header values
@pytest.mark.parametrize(
    "change, words",
    [
        ({"format": "something-else"}, "is a 'something-else' file, not a fractalseq-test file"),
        ({"format": None}, "names no format in its header"),
        ({"version": 2}, "version 2"),
        ({"version": "1"}, "version '1'"),
        ({"version": True}, "version True"),
        ({"sha256": ["a", "b"]}, "checksum list is damaged"),
        ({"sha256": {"cells": "xyz", "counts": "0" * 64}}, "checksum list is damaged"),
        ({"sha256": {"../cells": "0" * 64}}, "checksum list is damaged"),
        ({"sha256": {"header": "0" * 64}}, "checksum list is damaged"),
        ({"arrays": {"cells": {"dtype": "<u8", "shape": [10]}}}, "array list and checksum list differ"),
        ({"arrays": "all"}, "array list and checksum list differ"),
    ],
)
def test_impossible_header_values_with_correct_checksums_are_refused(tmp_path, change, words):
    msg = refused(craft_good(tmp_path / "h.npz", **change))
    assert words in msg


@pytest.mark.parametrize(
    "spec",
    [
        {"dtype": "O", "shape": [10]},
        {"dtype": "<U8", "shape": [10]},
        {"dtype": "(2,)<u8", "shape": [5]},
        {"dtype": "<u8", "shape": [-10]},
        {"dtype": "<u8", "shape": [10.0]},
        {"dtype": "<u8", "shape": "10"},
        {"dtype": "<u8"},
        {"dtype": 8, "shape": [10]},
        {"dtype": "not a dtype", "shape": [10]},
    ],
)
def test_impossible_declared_layout_is_refused(tmp_path, spec):
    header, arrays = good_parts()
    header["arrays"]["cells"] = spec
    msg = refused(craft(tmp_path / "l.npz", header, {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}))
    assert "impossible dtype or shape for array 'cells'" in msg


def test_header_that_is_not_json_or_not_bytes_is_refused(tmp_path):
    _, arrays = good_parts()
    members = {f"{k}.npy": npy_bytes(v) for k, v in arrays.items()}
    p1 = tmp_path / "nojson.npz"
    with zipfile.ZipFile(p1, "w") as zf:
        zf.writestr("header.npy", npy_bytes(np.frombuffer(b"\xff{not json", np.uint8)))
        for k, v in members.items():
            zf.writestr(k, v)
    assert "not UTF-8 JSON" in refused(p1)
    p2 = tmp_path / "floathead.npz"
    with zipfile.ZipFile(p2, "w") as zf:
        zf.writestr("header.npy", npy_bytes(np.zeros(4)))
    assert "not a byte string" in refused(p2)
    p3 = tmp_path / "listhead.npz"
    with zipfile.ZipFile(p3, "w") as zf:
        zf.writestr("header.npy", npy_bytes(np.frombuffer(b"[1, 2]", np.uint8)))
    assert "names no format in its header" in refused(p3)


# ------------------------------------------------------------------ not a container at all
def test_renamed_npy_is_refused(tmp_path):
    p = tmp_path / "single.npz"
    np.save(tmp_path / "single.npy", np.arange(5))
    (tmp_path / "single.npy").rename(p)
    assert "single numpy array (.npy)" in refused(p)


def test_text_file_is_refused(tmp_path):
    p = tmp_path / "notes.npz"
    p.write_text("format: fractalseq-test\nversion: 1\n")
    assert "is a text file" in refused(p)


def test_empty_file_is_refused(tmp_path):
    p = tmp_path / "empty.npz"
    p.write_bytes(b"")
    assert "is an empty file" in refused(p)


@pytest.mark.parametrize("keep", [0.5, 0.9, -22, -1])
def test_truncated_zip_is_refused(tmp_path, keep):
    good = write_container(tmp_path / "good.npz", {"format": KIND, "version": 1},
                           {"a": np.arange(4000, dtype=np.uint64), "b": np.ones((30, 4), np.uint32)})
    raw = good.read_bytes()
    cut = int(len(raw) * keep) if isinstance(keep, float) else len(raw) + keep
    p = tmp_path / "cut.npz"
    p.write_bytes(raw[:cut])
    assert "truncated or damaged" in refused(p)


def test_missing_path_and_folder_are_input_errors(tmp_path):
    from fractalseq.errors import InputError

    with pytest.raises(InputError):
        read_container(tmp_path / "nope.npz", KIND)
    with pytest.raises(InputError):
        read_container(tmp_path, KIND)
