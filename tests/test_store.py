"""Tests for rlmeson.io.store: round trips, cache hits, corruption, atomicity, plain-h5py files."""

from __future__ import annotations

import json
import os
import re
import warnings

import h5py
import numpy as np
import pytest

from rlmeson.io import store as st
from rlmeson.io.store import Entry, Store, StoreError, StoreWarning


def sample_arrays() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(7)
    return {
        "dressing": rng.standard_normal((40, 3)),
        "amplitude": rng.standard_normal((4, 5, 6)) + 1j * rng.standard_normal((4, 5, 6)),
        "counts": np.arange(12, dtype=np.int32).reshape(3, 4),
        "mask": np.array([True, False, True]),
        "mass": np.float64(0.138),
        "empty": np.zeros((0, 2)),
    }


def sample_attrs() -> dict:
    return {
        "label": "pion",
        "n_radial": 64,
        "tolerance": 1e-10,
        "converged": True,
        "note": None,
        "panels": [0.0, 1.5, 3.0],
        "params": {"omega": 0.4, "d": [0.93, {"unit": "GeV^2", "tags": ("a", "b")}]},
        "huge": 2**70,
        "with_nul": "a\0b",
        "empty": "",
        "not_a_number": float("nan"),
    }


def assert_arrays_equal(got: dict, want: dict) -> None:
    assert set(got) == set(want)
    for name, value in want.items():
        value = np.asarray(value)
        assert got[name].dtype == value.dtype, name
        assert got[name].shape == value.shape, name
        np.testing.assert_array_equal(got[name], value)


def assert_attrs_equal(got: dict, want: dict) -> None:
    # Compare through canonical JSON so that NaN == NaN and tuples == lists.
    assert st._canonical_json(got) == st._canonical_json(want)


def leftover_temps(directory) -> list[str]:
    return [p.name for p in directory.iterdir() if p.name.endswith(".tmp")]


class Counter:
    """A compute() that counts its calls."""

    def __init__(self, arrays=None, attrs=None):
        self.calls = 0
        self.arrays = arrays if arrays is not None else {"x": np.linspace(0.0, 1.0, 5)}
        self.attrs = attrs if attrs is not None else {"source": "computed"}

    def __call__(self):
        self.calls += 1
        return self.arrays, self.attrs


def corrupt_middle(path, n: int = 256) -> None:
    data = bytearray(path.read_bytes())
    mid = len(data) // 2
    for i in range(mid - n // 2, mid + n // 2):
        data[i] ^= 0xFF
    path.write_bytes(bytes(data))


def truncate_half(path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


# ----------------------------------------------------------------------------------------
# Locations and names

def test_default_root_respects_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "explicit"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert st.default_root() == tmp_path / "explicit"
    monkeypatch.delenv("RLMESON_CACHE")
    assert st.default_root() == tmp_path / "xdg" / "rlmeson" / "store"
    monkeypatch.delenv("XDG_CACHE_HOME")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert st.default_root() == tmp_path / "home" / ".cache" / "rlmeson" / "store"


def test_root_is_created_lazily(tmp_path):
    root = tmp_path / "cache"
    store = Store(root)
    assert store.get("gap", "abc") is None
    assert not root.exists()
    store.put("gap", "abc", {"x": np.ones(2)}, {})
    assert (root / "gap" / "abc.h5").is_file()


def test_store_uses_default_root(monkeypatch, tmp_path):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "env"))
    assert Store().path("gap", "k1") == tmp_path / "env" / "gap" / "k1.h5"


@pytest.mark.parametrize("bad", ["", "a/b", "..", "a.b", "a b", "é", "a\n", None, 3, "x" * 201])
def test_bad_kind_or_key_rejected(tmp_path, bad):
    store = Store(tmp_path)
    with pytest.raises(ValueError):
        store.path(bad, "key")
    with pytest.raises(ValueError):
        store.path("kind", bad)


def test_path_layout(tmp_path):
    assert Store(tmp_path).path("bse-pi", "0a_F-9") == tmp_path / "bse-pi" / "0a_F-9.h5"


# ----------------------------------------------------------------------------------------
# Round trips and cache hits

def test_put_get_round_trip(tmp_path):
    store = Store(tmp_path)
    arrays, attrs = sample_arrays(), sample_attrs()
    path = store.put("gap", "k1", arrays, attrs)
    entry = store.get("gap", "k1")
    assert isinstance(entry, Entry)
    assert entry.path == path == store.path("gap", "k1")
    assert_arrays_equal(entry.arrays, arrays)
    assert_attrs_equal(entry.attrs, attrs)
    assert entry.attrs["params"]["d"][1]["tags"] == ["a", "b"]
    assert entry.attrs["huge"] == 2**70 and entry.attrs["with_nul"] == "a\0b"
    assert type(entry.attrs["n_radial"]) is int and type(entry.attrs["converged"]) is bool


def test_more_dtypes_and_byte_orders(tmp_path):
    store = Store(tmp_path)
    arrays = {
        "f32": np.arange(6, dtype=np.float32).reshape(2, 3),
        "f16": np.ones(3, dtype=np.float16),
        "c64": np.array([1 + 2j, 3 - 4j], dtype=np.complex64),
        "u8": np.arange(5, dtype=np.uint8),
        "big_endian": np.arange(4, dtype=">f8"),
        "strided": np.arange(20.0)[::3],
        "fortran": np.asfortranarray(np.arange(12.0).reshape(3, 4)),
    }
    store.put("k", "dtypes", arrays, {"np_scalars": [np.float32(0.5), np.int16(3), np.bool_(True)]})
    entry = store.get("k", "dtypes")
    for name, value in arrays.items():
        np.testing.assert_array_equal(entry.arrays[name], value)
        assert entry.arrays[name].dtype == value.dtype.newbyteorder("=")
    assert entry.attrs["np_scalars"] == [0.5, 3, True]


def test_put_replaces_existing_entry(tmp_path):
    store = Store(tmp_path)
    store.put("k", "a", {"x": np.zeros(3)}, {"v": 1})
    store.put("k", "a", {"y": np.ones(2)}, {"v": 2})
    entry = store.get("k", "a")
    assert set(entry.arrays) == {"y"} and entry.attrs == {"v": 2}
    assert leftover_temps(tmp_path / "k") == []


def test_fetch_or_compute_hits_second_time(tmp_path):
    store = Store(tmp_path)
    compute = Counter()
    first, hit1 = store.fetch_or_compute("gap", "k1", compute)
    second, hit2 = store.fetch_or_compute("gap", "k1", compute)
    assert (hit1, hit2) == (False, True)
    assert compute.calls == 1
    assert_arrays_equal(first.arrays, compute.arrays)
    assert_arrays_equal(second.arrays, compute.arrays)
    assert first.attrs == second.attrs == compute.attrs

    _, hit3 = store.fetch_or_compute("gap", "k2", compute)
    _, hit4 = store.fetch_or_compute("other", "k1", compute)
    assert (hit3, hit4) == (False, False)
    assert compute.calls == 3


def test_fetch_or_compute_rejects_bad_compute_result(tmp_path):
    with pytest.raises(StoreError):
        Store(tmp_path).fetch_or_compute("k", "a", lambda: {"x": np.ones(2)})


# ----------------------------------------------------------------------------------------
# Invalid inputs write nothing

@pytest.mark.parametrize("arrays, attrs, error", [
    ({"s": np.array(["a", "b"])}, {}, TypeError),
    ({"o": np.array([object()])}, {}, TypeError),
    ({"a/b": np.ones(2)}, {}, ValueError),
    ({"x": np.ones(2)}, {"checksum": "mine"}, ValueError),
    ({"x": np.ones(2)}, {"format": "x"}, ValueError),
    ({"x": np.ones(2)}, {"d": {1: "int key"}}, TypeError),
    ({"x": np.ones(2)}, {"arr": np.ones(3)}, TypeError),
    ({"x": np.ones(2)}, {"": 1}, ValueError),
])
def test_invalid_input_rejected_without_writing(tmp_path, arrays, attrs, error):
    store = Store(tmp_path)
    with pytest.raises(error):
        store.put("k", "a", arrays, attrs)
    assert not store.path("k", "a").exists()
    assert list(tmp_path.rglob("*")) in ([], [tmp_path / "k"])


# ----------------------------------------------------------------------------------------
# Corruption and tampering

def big_entry(store, key="k1"):
    arrays = {"a": np.arange(4000, dtype=np.float64), "b": np.ones((50, 50), complex)}
    return store.put("gap", key, arrays, {"label": "x"})


@pytest.mark.parametrize("damage", [corrupt_middle, truncate_half,
                                    lambda p: p.write_bytes(b""),
                                    lambda p: p.write_bytes(b"not an hdf5 file at all")])
def test_damaged_file_is_discarded_and_recomputed(tmp_path, damage):
    store = Store(tmp_path)
    path = big_entry(store)
    damage(path)
    with pytest.warns(StoreWarning, match="recomputed"):
        assert store.get("gap", "k1") is None
    assert not path.exists()

    compute = Counter()
    big_entry(store)
    damage(path)
    with pytest.warns(StoreWarning):
        entry, hit = store.fetch_or_compute("gap", "k1", compute)
    assert not hit and compute.calls == 1
    assert_arrays_equal(entry.arrays, compute.arrays)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert store.fetch_or_compute("gap", "k1", compute)[1] is True


def tamper_dataset(path):
    with h5py.File(path, "r+") as h5:
        h5["a"][10] = -1.0


def tamper_attr(path):
    with h5py.File(path, "r+") as h5:
        h5.attrs["label"] = "y"


def tamper_add_dataset(path):
    with h5py.File(path, "r+") as h5:
        h5.create_dataset("extra", data=np.zeros(2))


def tamper_drop_checksum(path):
    with h5py.File(path, "r+") as h5:
        del h5.attrs["checksum"]


def tamper_format(path):
    with h5py.File(path, "r+") as h5:
        h5.attrs["format"] = "something-else"


@pytest.mark.parametrize("tamper", [tamper_dataset, tamper_attr, tamper_add_dataset,
                                    tamper_drop_checksum, tamper_format])
def test_tampered_valid_hdf5_is_detected(tmp_path, tamper):
    store = Store(tmp_path)
    path = big_entry(store)
    tamper(path)
    with pytest.warns(StoreWarning):
        assert store.get("gap", "k1") is None
    assert not path.exists()


def test_unrelated_entries_survive_corruption(tmp_path):
    store = Store(tmp_path)
    bad, good = big_entry(store, "bad"), big_entry(store, "good")
    corrupt_middle(bad)
    with pytest.warns(StoreWarning):
        store.get("gap", "bad")
    assert good.exists() and store.get("gap", "good") is not None


# ----------------------------------------------------------------------------------------
# Interrupted writes

def fail_on_second_dataset(monkeypatch):
    real = st._write_dataset
    calls = []

    def flaky(h5, name, array):
        calls.append(name)
        if len(calls) == 2:
            raise OSError("disk full (simulated)")
        real(h5, name, array)

    monkeypatch.setattr(st, "_write_dataset", flaky)
    return calls


def test_interrupted_put_leaves_nothing(tmp_path, monkeypatch):
    store = Store(tmp_path)
    calls = fail_on_second_dataset(monkeypatch)
    with pytest.raises(OSError, match="simulated"):
        store.put("gap", "k1", {"a": np.ones(3), "b": np.zeros(3), "c": np.ones(1)}, {})
    assert len(calls) == 2
    assert not store.path("gap", "k1").exists()
    assert list((tmp_path / "gap").iterdir()) == []


def test_interrupted_put_keeps_old_entry(tmp_path, monkeypatch):
    store = Store(tmp_path)
    store.put("gap", "k1", {"a": np.arange(3.0)}, {"version": 1})
    fail_on_second_dataset(monkeypatch)
    with pytest.raises(OSError):
        store.put("gap", "k1", {"a": np.ones(3), "b": np.zeros(3)}, {"version": 2})
    entry = store.get("gap", "k1")
    np.testing.assert_array_equal(entry.arrays["a"], np.arange(3.0))
    assert entry.attrs == {"version": 1}
    assert leftover_temps(tmp_path / "gap") == []


def test_atomic_path_success(tmp_path):
    target = tmp_path / "out.json"
    with st.atomic_path(target) as tmp:
        assert tmp.parent == tmp_path
        assert re.fullmatch(r"\.out\.json\.[A-Za-z0-9_]+-[0-9]+-[0-9a-f]{16}\.tmp", tmp.name)
        assert not target.exists()
        tmp.write_text("done")
    assert target.read_text() == "done"
    assert leftover_temps(tmp_path) == []


def test_exception_inside_atomic_path_keeps_old_version(tmp_path):
    target = tmp_path / "notes.txt"
    st.atomic_write_text(target, "old version\n")
    with pytest.raises(RuntimeError, match="boom"):
        with st.atomic_path(target) as tmp:
            tmp.write_text("new, half writ")
            raise RuntimeError("boom")
    assert target.read_text() == "old version\n"
    assert leftover_temps(tmp_path) == []


def test_exception_inside_atomic_path_creates_nothing(tmp_path):
    target = tmp_path / "fresh.bin"
    with pytest.raises(KeyboardInterrupt):
        with st.atomic_path(target) as tmp:
            tmp.write_bytes(b"partial")
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []


def test_atomic_write_text_failing_rename_keeps_old_version(tmp_path, monkeypatch):
    target = tmp_path / "notes.txt"
    st.atomic_write_text(target, "old version\n")

    def broken_replace(src, dst):
        raise OSError("rename failed (simulated)")

    monkeypatch.setattr(st.os, "replace", broken_replace)
    with pytest.raises(OSError, match="simulated"):
        st.atomic_write_text(target, "new version\n")
    assert target.read_text() == "old version\n"
    assert leftover_temps(tmp_path) == []


def test_atomic_write_bytes_and_text(tmp_path):
    st.atomic_write_bytes(tmp_path / "b.bin", b"\x00\x01\xff")
    assert (tmp_path / "b.bin").read_bytes() == b"\x00\x01\xff"
    st.atomic_write_text(tmp_path / "t.txt", "αβ\r\nγ")
    assert (tmp_path / "t.txt").read_bytes() == "αβ\r\nγ".encode("utf-8")
    st.atomic_write_text(tmp_path / "t.txt", "replaced")
    assert (tmp_path / "t.txt").read_text() == "replaced"
    assert leftover_temps(tmp_path) == []


def test_atomic_write_keeps_umask_permissions(tmp_path):
    old = os.umask(0o022)
    try:
        st.atomic_write_text(tmp_path / "p.txt", "x")
    finally:
        os.umask(old)
    assert (tmp_path / "p.txt").stat().st_mode & 0o777 == 0o644


# ----------------------------------------------------------------------------------------
# Plain h5py

def test_file_is_plain_hdf5(tmp_path):
    store = Store(tmp_path)
    arrays, attrs = sample_arrays(), sample_attrs()
    path = store.put("gap", "k1", arrays, attrs)
    with h5py.File(path, "r") as h5:
        assert set(h5) == set(arrays)
        for name, value in arrays.items():
            assert isinstance(h5[name], h5py.Dataset)
            np.testing.assert_array_equal(h5[name][()], value)
        assert h5["amplitude"].dtype == np.complex128
        assert h5.attrs["format"] == "rlmeson-store-2"
        assert h5.attrs["entry"] == "gap/k1"     # the name it was written under
        assert re.fullmatch(r"[0-9a-f]{64}", h5.attrs["checksum"])
        assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", h5.attrs["created_utc"])
        assert h5.attrs["label"] == "pion"
        assert h5.attrs["n_radial"] == 64 and h5.attrs["converged"]
        json_names = json.loads(h5.attrs["json_attrs"])
        assert set(json_names) == {"note", "panels", "params", "huge", "with_nul"}
        assert h5.attrs["note"] == "null"
        assert json.loads(h5.attrs["params"])["d"][1]["unit"] == "GeV^2"
        assert json.loads(h5.attrs["panels"]) == [0.0, 1.5, 3.0]


# ----------------------------------------------------------------------------------------
# An entry knows its name; leftovers of killed writers; an unwritable store

def test_entry_copied_under_another_key_is_rejected(tmp_path):
    """A copied (or renamed) entry must not be served for the key it now sits under."""
    store = Store(tmp_path)
    src = store.put("quark", "aaa", {"x": np.arange(3.0)}, {"mass": 3.0})
    dst = store.path("quark", "bbb")
    dst.write_bytes(src.read_bytes())
    with pytest.warns(StoreWarning, match="written as 'quark/aaa'"):
        assert store.get("quark", "bbb") is None
    assert not dst.exists() and store.get("quark", "aaa") is not None


def test_temporaries_of_a_killed_writer_are_removed_by_the_next_write(tmp_path):
    """A process killed while writing leaves its temporary file; the next write into the
    directory removes it (its pid is dead), and never one of a live process."""
    import subprocess
    import sys

    store = Store(tmp_path)
    store.put("gap", "k0", {"x": np.zeros(2)}, {})
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    pid = int(dead.stdout)
    stale = tmp_path / "gap" / f".k1.h5.{st._HOST}-{pid}-{'0' * 16}.tmp"
    live = tmp_path / "gap" / f".k2.h5.{st._HOST}-{os.getpid()}-{'1' * 16}.tmp"
    stale.write_bytes(b"half")
    live.write_bytes(b"busy")
    store.put("gap", "k3", {"x": np.ones(2)}, {})
    assert not stale.exists() and live.exists()


def test_unwritable_store_warns_once_and_goes_on(tmp_path):
    (tmp_path / "file").write_text("not a directory")
    store = Store(tmp_path / "file" / "store")
    assert "file" in store.check_writable()
    with pytest.warns(StoreWarning) as rec:
        assert store.try_put("gap", "k", {"x": np.zeros(1)}, {}) is None
        assert store.try_put("gap", "k2", {"x": np.zeros(1)}, {}) is None
    assert len(rec) == 1 and "going on without caching" in str(rec[0].message)
    assert Store(tmp_path / "ok").check_writable() is None and not leftover_temps(tmp_path / "ok")
