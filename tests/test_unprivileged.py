"""Commands run by an unprivileged user whose home and package folder are not writable.

numba caches the compiled kernels (``cache=True``) beside the sources or in
the home folder; with neither writable it used to refuse with "no locator
available".  :mod:`fractalseq._numba_cache` then points ``NUMBA_CACHE_DIR`` at
``<tempdir>/fractalseq-numba-<uid>`` (mode 0700, used only when it is the
user's own private folder).

The end-to-end tests need root (to switch to the user ``nobody`` with
``setpriv``).  They copy the package under test into a folder everybody can
read but nobody may write, copy the third-party packages a ``count`` run
imports (found by running it once as root) beside it, and find an interpreter
``nobody`` can execute with the same Python version (the project's virtual
environment may live under /root, mode 700): the running interpreter if
reachable, a system ``pythonX.Y`` of the same version, or else a copy of the
base installation's interpreter and standard library.

The counted sequence is invented (a seeded random DNA string); the counts are
checked against the standard library's ``collections.Counter``.
"""

from __future__ import annotations

import collections
import json
import os
import pwd
import shutil
import stat
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest

from fractalseq import _numba_cache

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
AS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0
needs_root = pytest.mark.skipif(not AS_ROOT, reason="switching to the user nobody needs root")


# ------------------------------------------------------------------ the per-user folder (any user)
def test_shared_folder_is_created_private(tmp_path):
    folder = _numba_cache.shared_cache_folder(tmp_path)
    assert folder == tmp_path / f"fractalseq-numba-{os.getuid()}"
    st = os.lstat(folder)
    assert stat.S_ISDIR(st.st_mode) and stat.S_IMODE(st.st_mode) == 0o700 and st.st_uid == os.getuid()
    assert _numba_cache.shared_cache_folder(tmp_path) == folder  # reused when it is ours and private


def test_shared_folder_writable_by_others_is_refused(tmp_path):
    folder = tmp_path / f"fractalseq-numba-{os.getuid()}"
    folder.mkdir()
    folder.chmod(0o777)
    assert _numba_cache.shared_cache_folder(tmp_path) is None


def test_shared_folder_that_is_a_link_is_refused(tmp_path):
    (tmp_path / "elsewhere").mkdir(mode=0o700)
    (tmp_path / f"fractalseq-numba-{os.getuid()}").symlink_to(tmp_path / "elsewhere")
    assert _numba_cache.shared_cache_folder(tmp_path) is None


@needs_root
def test_shared_folder_of_another_owner_is_refused(tmp_path):
    folder = tmp_path / f"fractalseq-numba-{os.getuid()}"
    folder.mkdir(mode=0o700)
    os.chown(folder, pwd.getpwnam("nobody").pw_uid, -1)
    assert _numba_cache.shared_cache_folder(tmp_path) is None


def test_configure_leaves_a_given_cache_dir_alone(monkeypatch, tmp_path):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path))
    assert _numba_cache.configure() is None
    assert os.environ["NUMBA_CACHE_DIR"] == str(tmp_path)


# ------------------------------------------------------------------ end to end as nobody
_PROBE = r"""
import json, sys, sysconfig
from fractalseq.cli.app import main

try:
    main(sys.argv[1:])
except SystemExit:
    pass
sites = {sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]}
tops = set()
for m in list(sys.modules.values()):
    f = getattr(m, "__file__", None) or ""
    for s in sites:
        if f.startswith(s + "/"):
            tops.add(f[len(s) + 1:].split("/")[0])
print(json.dumps({"sites": sorted(sites), "tops": sorted(tops)}))
"""


def _nobody() -> tuple[int, int]:
    pw = pwd.getpwnam("nobody")
    return pw.pw_uid, pw.pw_gid


def _as_nobody(args: list[str], env: dict[str, str], timeout: float | None = None) -> subprocess.CompletedProcess:
    uid, gid = _nobody()
    if shutil.which("setpriv"):
        cmd = ["setpriv", f"--reuid={uid}", f"--regid={gid}", "--clear-groups", *args]
    else:
        cmd = ["runuser", "-u", "nobody", "--", *args]
    return subprocess.run(cmd, capture_output=True, text=True, env=env, cwd="/", timeout=timeout)


def _plain_env(**extra: str) -> dict[str, str]:
    env = {"PATH": "/usr/local/bin:/usr/bin:/bin", "HOME": pwd.getpwnam("nobody").pw_dir or "/nonexistent",
           "LANG": "C.UTF-8", "PYTHONNOUSERSITE": "1"}
    env.update(extra)
    return env


def _runs_as_nobody(python: str, extra: dict[str, str] | None = None) -> bool:
    done = _as_nobody([python, "-c", "import sys; print('%d.%d' % sys.version_info[:2])"], _plain_env(**(extra or {})))
    return done.returncode == 0 and done.stdout.strip() == "%d.%d" % sys.version_info[:2]


def _copy_base_interpreter(dest: Path) -> str:
    """A copy of the base interpreter and its standard library (no site-packages, no test suite)."""
    base = Path(sys.base_prefix)
    exe = Path(sys._base_executable if hasattr(sys, "_base_executable") else sys.executable).resolve()
    ver = "python%d.%d" % sys.version_info[:2]
    (dest / "bin").mkdir(parents=True)
    shutil.copy2(exe, dest / "bin" / ver)
    (dest / "lib").mkdir()
    for lib in (base / "lib").glob("libpython*.so*"):  # a shared-library build needs it beside the copy
        shutil.copy2(lib, dest / "lib" / lib.name)
    skip = shutil.ignore_patterns("site-packages", "test", "tests", "idlelib", "tkinter", "turtledemo",
                                  "ensurepip", "lib2to3", "config-*")
    shutil.copytree(base / "lib" / ver, dest / "lib" / ver, ignore=skip)
    return str(dest / "bin" / ver)


def _interpreter(world: Path) -> tuple[str, dict[str, str]]:
    """An interpreter of this Python version that nobody can run, and the environment it needs."""
    version = "python%d.%d" % sys.version_info[:2]
    candidates = [sys.executable, os.path.realpath(sys.executable),
                  os.path.realpath(getattr(sys, "_base_executable", sys.executable))]
    candidates += [os.path.join(d, version) for d in ("/usr/bin", "/usr/local/bin", "/bin")]
    for python in dict.fromkeys(candidates):
        if os.path.isfile(python) and _runs_as_nobody(python):
            return python, {}
    python = _copy_base_interpreter(world / "python")
    extra = {"LD_LIBRARY_PATH": str(world / "python" / "lib"), "PYTHONHOME": str(world / "python")}
    if not _runs_as_nobody(python, extra):
        pytest.fail(f"no interpreter of Python {version} can be run by the user nobody here, not even a copy of {python}")
    return python, extra


@pytest.fixture(scope="module")
def world():
    """A folder everybody can read (nobody can write but ``tmp/``): package, third-party packages, input."""
    base = Path(tempfile.mkdtemp(prefix="fractalseq-unpriv-", dir="/tmp"))
    try:
        base.chmod(0o755)
        pkg = base / "pkg"
        shutil.copytree(ROOT / "fractalseq", pkg / "fractalseq", ignore=shutil.ignore_patterns("__pycache__"))
        rng = np.random.default_rng(2024)
        seq = "".join(rng.choice(list("ACGT"), 20000))
        fasta = base / "invented.fa"
        fasta.write_text(">invented random DNA, seed 2024\n" + "\n".join(seq[i:i + 60] for i in range(0, len(seq), 60)) + "\n")
        # which third-party packages does a count import (compiling its kernels afresh)?
        with tempfile.TemporaryDirectory() as cache:
            env = dict(os.environ, PYTHONPATH=str(pkg), NUMBA_CACHE_DIR=cache)
            probe = subprocess.run([sys.executable, "-c", _PROBE, "count", str(fasta), "--depth", "6", "--json"],
                                   capture_output=True, text=True, env=env, check=True)
        found = json.loads(probe.stdout.strip().splitlines()[-1])
        site = base / "site"
        site.mkdir()
        for s in map(Path, found["sites"]):
            wanted = set(found["tops"])
            wanted |= {p.name for p in s.glob("*.libs")} | {p.name for p in s.glob("*.dist-info")}
            for name in sorted(wanted):
                src = s / name
                if name.startswith(("fractalseq", "__editable__")) or not src.exists() or (site / name).exists():
                    continue
                if src.is_dir():
                    shutil.copytree(src, site / name, ignore=shutil.ignore_patterns("tests"))
                else:
                    shutil.copy2(src, site / name)
        (base / "tmp").mkdir()
        (base / "tmp").chmod(0o1777)
        python, extra = _interpreter(base)
        env = _plain_env(PYTHONPATH=f"{pkg}:{site}", TMPDIR=str(base / "tmp"), **extra)
        yield {"base": base, "python": python, "env": env, "fasta": fasta, "seq": seq}
    finally:
        shutil.rmtree(base, ignore_errors=True)


def _expected(seq: str, depth: int) -> dict:
    """Distinct words and occurrences per length, and the most frequent words (stdlib Counter)."""
    ladder = []
    for n in range(1, depth + 1):
        c = collections.Counter(seq[i:i + n] for i in range(len(seq) - n + 1))
        ladder.append((n, len(c), sum(c.values())))
    top = collections.Counter(seq[i:i + depth] for i in range(len(seq) - depth + 1))
    return {"ladder": ladder, "top": top}


def _count_as_nobody(world, env=None) -> subprocess.CompletedProcess:
    return _as_nobody([world["python"], "-m", "fractalseq", "count", str(world["fasta"]), "--depth", "6", "--top", "5",
                       "--json"], env or world["env"])


def _check_counts(done: subprocess.CompletedProcess, seq: str) -> None:
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    want = _expected(seq, 6)
    assert [(r["depth"], r["distinct"], r["occurrences"]) for r in out["ladder"]] == want["ladder"]
    for row in out["top"]:
        assert want["top"][row["word"]] == row["count"]
    assert [r["count"] for r in out["top"]] == [c for _, c in want["top"].most_common(5)]


@needs_root
def test_count_works_for_nobody_with_read_only_package_and_home(world):
    uid, _ = _nobody()
    # nobody really cannot write the package folder or the home folder
    probe = _as_nobody([world["python"], "-c", "import os, sys; print(os.access(sys.argv[1], os.W_OK), "
                        "os.access(os.path.expanduser('~'), os.W_OK))", str(world["base"] / "pkg" / "fractalseq")],
                       world["env"])
    assert probe.stdout.split() == ["False", "False"], probe.stderr
    done = _count_as_nobody(world)
    _check_counts(done, world["seq"])
    folder = world["base"] / "tmp" / f"fractalseq-numba-{uid}"
    st = os.lstat(folder)
    assert st.st_uid == uid and stat.S_IMODE(st.st_mode) == 0o700
    index = sorted(p.name for p in folder.rglob("*.nbi"))
    assert index, "numba wrote no cache index into the per-user folder"
    # a second run reads the cache back and still counts correctly
    _check_counts(_count_as_nobody(world), world["seq"])
    assert sorted(p.name for p in folder.rglob("*.nbi")) == index


@needs_root
def test_a_squatted_shared_folder_is_not_used(world):
    uid, _ = _nobody()
    tmp = world["base"] / "tmp-squat"
    tmp.mkdir()
    tmp.chmod(0o1777)
    squat = tmp / f"fractalseq-numba-{uid}"
    squat.mkdir(mode=0o777)
    squat.chmod(0o777)  # made by another user (root here), writable by all
    env = dict(world["env"], TMPDIR=str(tmp))
    done = _count_as_nobody(world, env)
    _check_counts(done, world["seq"])
    assert "not a private folder of this user" in done.stderr
    assert not list(squat.iterdir())
    # the private folder of that run was removed at exit
    assert [p.name for p in tmp.iterdir()] == [squat.name]


def _one_sentence(done: subprocess.CompletedProcess) -> str:
    lines = [ln for ln in done.stderr.splitlines() if ln.strip()]
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert len(lines) == 1 and lines[0].startswith("error: ") and lines[0].endswith("."), done.stderr
    return lines[0]


@needs_root
def test_an_unreadable_input_is_one_sentence_for_nobody(world):
    secret = world["base"] / "secret.fa"
    shutil.copy(world["fasta"], secret)
    secret.chmod(0o600)  # root's file: nobody may not read it
    done = _as_nobody([world["python"], "-m", "fractalseq", "count", str(secret)], world["env"])
    line = _one_sentence(done)
    assert "secret.fa" in line and "permission denied" in line.lower() and "permissions" in line


@needs_root
@pytest.mark.parametrize("argv", [
    ("count", "{fasta}", "--depth", "4", "--save", "{ro}/counts.npz"),
    ("learn", "{fasta}", "--depth", "3", "-o", "{ro}/model.npz"),
    ("render", "{fasta}", "-o", "{ro}/picture.png"),
    ("profile", "{fasta}", "--boot", "0", "--out", "{ro}/report"),
    ("scan", "{fasta}", "--window", "2000", "--out", "{ro}/scan"),
    ("survey", "{fasta}", "{fasta}", "--out", "{ro}/survey"),
], ids=["count-save", "learn", "render", "profile", "scan", "survey"])
def test_a_read_only_output_place_is_refused_before_any_work(world, argv):
    """Item 11 of the hostile-input issue: the user's path is named, never a temporary ``.part`` file, and the
    refusal comes first (the pause hook before the counting kernel is armed: a run that got that far would hang)."""
    ro = world["base"]  # root's folder, 0755: nobody cannot create anything in it
    args = [a.format(fasta=world["fasta"], ro=ro) for a in argv]
    env = dict(world["env"], FRACTALSEQ_PAUSE_AT="words.kernel:1")
    before = sorted(p.name for p in ro.iterdir())
    done = _as_nobody([world["python"], "-m", "fractalseq", *args], env, timeout=300)
    line = _one_sentence(done)
    target = Path(args[args.index("--save" if "--save" in args else "-o" if "-o" in args else "--out") + 1]).name
    assert target in line and ".part" not in line and "Permission denied" in line, line
    assert sorted(p.name for p in ro.iterdir()) == before
