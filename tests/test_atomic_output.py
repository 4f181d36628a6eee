"""Result files appear whole or not at all, with ordinary permissions."""

from __future__ import annotations

import os
import stat

import pytest

from gloam.io import atomic_output, write_lines


def test_failed_write_leaves_neither_target_nor_temporary(tmp_path):
    target = tmp_path / "out" / "table.tsv"
    with pytest.raises(RuntimeError):
        with atomic_output(target) as temporary:
            temporary.write_text("half")
            raise RuntimeError("interrupted")
    assert not target.exists()
    assert list(target.parent.iterdir()) == []


def test_result_gets_the_mode_a_new_file_gets_under_the_umask(tmp_path):
    previous = os.umask(0o022)
    try:
        write_lines(["GENE1"], tmp_path / "genes.txt")
    finally:
        os.umask(previous)
    mode = stat.S_IMODE((tmp_path / "genes.txt").stat().st_mode)
    assert mode == 0o644
    assert (tmp_path / "genes.txt").read_text() == "GENE1\n"


def test_leftover_of_a_killed_writer_is_removed_by_the_next_write(tmp_path):
    leftover = tmp_path / ".table.tsv.abc123.partial.tsv"
    leftover.write_text("half")
    unrelated = tmp_path / ".other.tsv.abc123.partial.tsv"
    unrelated.write_text("someone else's")
    with atomic_output(tmp_path / "table.tsv") as temporary:
        temporary.write_text("whole")
    assert sorted(p.name for p in tmp_path.iterdir()) == [unrelated.name, "table.tsv"]
