"""The on-disk cache of the pseudo-adiabat tables: reused, keyed, atomic, self-healing."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from gridstab import adiabats, tablecache


def test_cached_tables_equal_a_fresh_integration(tmp_path):
    # the first call builds and stores; the second reads the file back; both equal a
    # fresh integration bit for bit (the file stores float64 exactly)
    built = tablecache.load_or_build(tmp_path)
    path = tablecache.cache_file(tmp_path)
    assert path.exists()
    reread = tablecache.read_tables(path)
    fresh = adiabats.build_adiabat_tables()
    for name in adiabats.AdiabatTables._fields:
        np.testing.assert_array_equal(getattr(built, name), getattr(fresh, name))
        np.testing.assert_array_equal(getattr(reread, name), getattr(fresh, name))
    # no temporary file is left behind
    assert [p.name for p in tmp_path.iterdir()] == [path.name]


def test_key_follows_the_code():
    sources = [b"a", b"b"]
    assert tablecache.table_key(sources) == tablecache.table_key(list(sources))
    assert tablecache.table_key(sources) != tablecache.table_key([b"a", b"b "])
    assert tablecache.table_key(sources) != tablecache.table_key([b"b", b"a"])
    assert tablecache.current_key() in tablecache.cache_file(tablecache.Path("x")).name


@pytest.mark.parametrize("damage", ["truncated", "garbage", "wrong shape"])
def test_damaged_cache_file_is_rebuilt(tmp_path, damage):
    path = tablecache.cache_file(tmp_path)
    tablecache.load_or_build(tmp_path)
    if damage == "truncated":
        path.write_bytes(path.read_bytes()[:1000])
    elif damage == "garbage":
        path.write_bytes(b"not a table file")
    else:
        np.savez(path, parcel=np.zeros((2, 2, 2)), label=np.zeros((2, 2)), theta_e=np.zeros(3))
    assert tablecache.read_tables(path) is None
    tables = tablecache.load_or_build(tmp_path)
    assert tables.label.shape == adiabats.TABLE_SHAPES["label"]
    assert tablecache.read_tables(path) is not None  # replaced by a good copy


def test_unwritable_folder_still_gives_tables(tmp_path):
    blocked = tmp_path / "file-not-folder"
    blocked.write_text("")
    tables = tablecache.load_or_build(blocked / "cache")
    assert tables.parcel.shape == adiabats.TABLE_SHAPES["parcel"]


def test_empty_setting_turns_the_cache_off(monkeypatch, tmp_path):
    monkeypatch.setenv("GRIDSTAB_CACHE_DIR", "")
    assert tablecache.cache_directory() is None
    monkeypatch.setenv("GRIDSTAB_CACHE_DIR", str(tmp_path))
    assert tablecache.cache_directory() == tmp_path


def test_processes_starting_at_once_share_the_cache(tmp_path):
    # four processes build into the same empty folder at the same moment: all succeed,
    # and exactly one complete table file remains
    script = textwrap.dedent(
        f"""
        from pathlib import Path
        from gridstab import tablecache
        tables = tablecache.load_or_build(Path({str(tmp_path)!r}))
        print(float(tables.label[100, 200]))
        """
    )
    runs = [subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True, env=dict(os.environ))
            for _ in range(4)]
    outputs = [run.communicate(timeout=600) for run in runs]
    assert all(run.returncode == 0 for run in runs), [err for _, err in outputs]
    assert len({out for out, _ in outputs}) == 1
    files = sorted(p.name for p in tmp_path.iterdir())
    assert files == [tablecache.cache_file(tmp_path).name]
    assert tablecache.read_tables(tmp_path / files[0]) is not None
