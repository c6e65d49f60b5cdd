"""Checks before work (``fractalseq.guards``): why a path cannot be opened, whether a size fits in memory.

Outside facts used: the errno a path lookup gives for a symbolic link loop (ELOOP), for a path
through a regular file (ENOTDIR) and for a missing file (ENOENT) — POSIX ``stat(2)`` (common
practice); ``resource.setrlimit(RLIMIT_AS)`` caps a process's address space (Python's
``resource`` documentation).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys

import pytest

from fractalseq.errors import ParameterError
from fractalseq.guards import check_memory, format_bytes, memory_budget, path_problem

from _paths import ROOT


def test_path_problem_names_loops_dangling_links_and_files_in_the_path(tmp_path):
    (tmp_path / "file.fa").write_text(">x\nACGT\n")
    os.symlink("b", tmp_path / "a")
    os.symlink("a", tmp_path / "b")
    os.symlink("nowhere.fa", tmp_path / "dangling")
    assert path_problem(str(tmp_path / "file.fa")) is None
    assert "symbolic link loop" in path_problem(str(tmp_path / "a"))
    assert "symbolic link to nowhere.fa, which does not exist" in path_problem(str(tmp_path / "dangling"))
    assert "part of its path is a file" in path_problem(str(tmp_path / "file.fa" / "x.fa"))
    assert path_problem(str(tmp_path / "missing.fa")) == "does not exist; check the path"
    assert "symbolic link loop" in path_problem(str(tmp_path / "a" / "x.fa"))  # a loop inside the path


def test_check_memory_refuses_beyond_the_budget_and_names_the_parameter():
    budget = memory_budget()
    check_memory(budget // 2, "half of it", "n_boot", "use fewer")  # fits: no error
    with pytest.raises(ParameterError) as info:
        check_memory(budget * 4, "four times the budget", "n_boot", "use fewer replicates")
    assert info.value.parameter == "n_boot"
    assert "four times the budget would need at least" in str(info.value)
    assert str(info.value).endswith("; use fewer replicates.")
    assert format_bytes(1536) == "1.5 KiB" and format_bytes(3 * 2**30) == "3 GiB" and format_bytes(12) == "12 bytes"


def test_the_budget_follows_the_address_space_limit():
    """A process limited to 3 GiB of address space sees a budget of at most 3 GiB."""
    code = (
        "import resource; resource.setrlimit(resource.RLIMIT_AS, (3 << 30, resource.RLIM_INFINITY));"
        "from fractalseq.guards import memory_budget; print(memory_budget())"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert int(done.stdout) <= 3 << 30


def test_replicates_permutations_and_lengths_are_bounded_before_any_work():
    from fractalseq.compare._drift import DriftOptions
    from fractalseq.datasets._scenario import check_size
    from fractalseq.resampling._options import Resampling
    from fractalseq.resampling._plan import make_plan

    huge = 4 * memory_budget()
    with pytest.raises(ParameterError) as info:
        Resampling(n_boot=huge)  # at least 240 bytes a replicate
    assert info.value.parameter == "n_boot" and "bootstrap replicates" in str(info.value)
    with pytest.raises(ParameterError) as info:
        DriftOptions(permutations=huge).check()
    assert info.value.parameter == "permutations"
    with pytest.raises(ParameterError) as info:
        check_size(huge)
    assert info.value.parameter == "length"
    # the exact plan: replicates x blocks x 24 bytes, known once the stream length is
    blocks = 10_000
    n_boot = memory_budget() // (24 * blocks) + 1
    with pytest.raises(ParameterError) as info:
        make_plan(blocks * 10, 10, n_boot)
    assert info.value.parameter == "n_boot" and f"{blocks} blocks" in str(info.value)
    assert make_plan(1000, 10, 20).n_boot == 20  # ordinary sizes pass


def test_out_of_memory_names_what_and_the_options_of_the_command(monkeypatch, capsys):
    """A MemoryError that still happens says what was allocated (numpy's words) and which options set it."""
    import fractalseq.jobs._files as files
    from fractalseq.cli.app import main

    def too_big(*args, **kwargs):
        raise MemoryError("Unable to allocate 7.45 TiB for an array with shape (1000000000, 1000) and data type float64")

    monkeypatch.setattr(files, "count_files", too_big)
    assert main(["count", str(ROOT / "reference" / "lambda_virus.fa.gz")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error: out of memory while running count (Unable to allocate 7.45 TiB")
    assert "--depth" in err and err.endswith(".") and len(err.splitlines()) == 1
    assert "depth" not in err.split("(")[0]  # the cause is not presumed to be the depth


def test_numpys_bare_full_stop_does_not_split_the_sentence(monkeypatch, capsys):
    import fractalseq.jobs._files as files
    from fractalseq.cli.app import main

    def too_big(*args, **kwargs):
        raise MemoryError("Unable to allocate 273. MiB for an array with shape (3572282, 10) and data type float64")

    monkeypatch.setattr(files, "count_files", too_big)
    assert main(["count", str(ROOT / "reference" / "lambda_virus.fa.gz")]) == 2
    err = capsys.readouterr().err.strip()
    assert "273 MiB" in err and not re.search(r"[.!?]\s+[A-Z]", err), err


def test_a_link_to_an_input_is_replaced_as_an_output_and_the_input_is_untouched(tmp_path):
    """An output path that is a symbolic link to an input: the atomic rename replaces the link itself
    (POSIX ``rename(2)`` acts on the link, not its target — common practice), so with --force the write
    is allowed and the input keeps its bytes; without --force the existing link is not overwritten."""
    fasta = tmp_path / "in.fa"
    fasta.write_text(">s invented test sequence\n" + "ACGTTGCA" * 200 + "\n")
    before = fasta.read_bytes()
    link = tmp_path / "counts.npz"
    link.symlink_to(fasta.name)
    cmd = [sys.executable, "-m", "fractalseq.cli", "count", str(fasta), "--depth", "3", "--save", str(link)]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    refused = subprocess.run(cmd, capture_output=True, text=True, env=env)
    assert refused.returncode == 2 and "already exists" in refused.stderr
    assert link.is_symlink()
    done = subprocess.run([*cmd, "--force"], capture_output=True, text=True, env=env)
    assert done.returncode == 0, done.stderr
    assert not link.is_symlink() and link.read_bytes()[:2] == b"PK"  # a zip archive took the link's place
    assert fasta.read_bytes() == before


_FREED_HALF = """
import numpy as np
from fractalseq.guards import return_freed_arrays

def rss():
    with open("/proc/self/status") as f:
        return next(int(x.split()[1]) for x in f if x.startswith("VmRSS")) // 1024

print(return_freed_arrays())
big = np.ones(24 << 17)  # 24 MiB freed: glibc alone would raise its mapping threshold above the 4-MiB blocks below (0 MiB returned)
del big
blocks = [np.ones(1 << 19) for _ in range(64)]  # 64 blocks of 4 MiB, touched
before = rss()
del blocks[::2]  # every other one freed, between live ones
print(before - rss())
"""


@pytest.mark.skipif(not sys.platform.startswith("linux") or os.confstr("CS_GNU_LIBC_VERSION") is None,
                    reason="glibc's allocator setting")
def test_freed_arrays_between_live_ones_leave_the_process():
    # 32 blocks of 4 MiB freed among live ones: with the setting every one is mapped apart and returned
    out = subprocess.run([sys.executable, "-c", _FREED_HALF], capture_output=True, text=True, check=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)}).stdout.split()
    assert out[0] == "True"
    assert int(out[1]) >= 120, out  # 128 MiB freed, all of it returned to the system
