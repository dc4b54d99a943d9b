"""Atomic product writing: all or nothing, readable with the usual umask mode."""
import os
import stat

import pytest

from tem.io.atomic import atomic_path, write_text_atomic


def test_failed_write_leaves_target_untouched(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_products_get_umask_permissions(tmp_path):
    old = os.umask(0o022)
    try:
        p = write_text_atomic(tmp_path / "a.csv", "x\n")
    finally:
        os.umask(old)
    assert stat.S_IMODE(p.stat().st_mode) == 0o644


@pytest.mark.parametrize("sub", ["figures", "figures/stations"])
def test_a_file_where_a_folder_goes_is_named(tmp_path, sub):
    from tem.errors import TemOutputError

    (tmp_path / "figures").write_text("x")
    with pytest.raises(TemOutputError) as exc:
        write_text_atomic(tmp_path / sub / "section.png", "y")
    assert exc.value.strerror == f"{tmp_path / 'figures'}: exists and is not a folder"
