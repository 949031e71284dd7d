"""Files are never lost: saves and exports refuse what would destroy work.

An export never replaces a diagram (the one being read, through a link or a hard link, or
any other); a C export checks both files before writing either; a save follows a link,
refuses a read-only file or folder, survives being killed at any moment, and the next
save clears the temporary files a killed save left.
"""
from __future__ import annotations

import os
import shutil
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from loopwright.engine.cli import main
from loopwright.engine.errors import ProjectFileError
from loopwright.engine.export import closed_loop_model, write_c, write_json, write_npz
from loopwright.engine.output_paths import OutputRefusedError
from loopwright.engine.project import dumps, load, loads, save

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "levitated_rotor_axis.lwd"
_CONTROLLER_C = ["--what", "controller", "--ts", "0.001"]

needs_posix = pytest.mark.skipif(os.name != "posix", reason="symbolic links, modes and signals as on POSIX")


@pytest.fixture
def diagram(tmp_path) -> Path:
    path = tmp_path / "rotor.lwd"
    shutil.copy(SAMPLE, path)
    return path


def _temps(path: Path) -> list[str]:
    return sorted(p.name for p in path.parent.glob(f".{path.name}.*.tmp"))


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _run_export(capsys, source: Path, *args: str) -> tuple[int, list[str]]:
    code = main(["export", str(source), *args])
    return code, capsys.readouterr().err.strip().splitlines()


# ---------------------------------------------------------------------------------------
# an export never replaces a diagram
# ---------------------------------------------------------------------------------------
@needs_posix
@pytest.mark.parametrize("how", ["same-path", "symlink", "hard-link", "dotted-path"])
def test_export_onto_the_diagram_being_read_is_refused(diagram, capsys, how):
    before = diagram.read_bytes()
    out = {"same-path": diagram, "dotted-path": diagram.parent / "." / diagram.name,
           "symlink": diagram.parent / "link.json", "hard-link": diagram.parent / "hard.json"}[how]
    if how == "symlink":
        out.symlink_to(diagram.name)
    elif how == "hard-link":
        os.link(diagram, out)
    code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(out))
    assert code == 2 and len(err) == 1 and "an export never replaces a diagram" in err[0]
    assert diagram.read_bytes() == before
    assert _temps(diagram) == []


@needs_posix
@pytest.mark.parametrize("name", ["other.lwd", "other.LWD", "saved_as.json", "link_to_other.npz"])
def test_export_onto_another_diagram_is_refused(diagram, capsys, name):
    other = diagram.parent / "other_real.lwd"
    shutil.copy(SAMPLE, other)
    target = diagram.parent / name
    if name.startswith("link"):
        target.symlink_to(other.name)
    else:
        shutil.copy(SAMPLE, target)
    before = target.read_bytes()
    code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(target))
    assert code == 2 and len(err) == 1 and "is a diagram file" in err[0]
    assert target.read_bytes() == before


def test_export_api_refuses_diagram_files(diagram, tmp_path):
    model = closed_loop_model(load(diagram))
    for writer in (write_json, write_npz):
        with pytest.raises(OutputRefusedError, match="never replaces a diagram"):
            writer(model, diagram)
    with pytest.raises(OutputRefusedError, match="never replaces a diagram"):
        write_json(model, tmp_path / "new.lwd")
    assert not (tmp_path / "new.lwd").exists()


@pytest.mark.parametrize("folder_name", ["ctrl.c", "ctrl.h"])
def test_c_export_where_source_or_header_is_a_folder_leaves_nothing(diagram, capsys, folder_name):
    (diagram.parent / folder_name).mkdir()
    before = _listing(diagram.parent)
    code, err = _run_export(capsys, diagram, *_CONTROLLER_C, "-o", str(diagram.parent / "ctrl.c"))
    assert code == 2 and len(err) == 1 and f"{folder_name}: cannot be written (it is a folder)" in err[0]
    assert _listing(diagram.parent) == before


def test_c_export_where_header_would_replace_a_diagram_leaves_nothing(diagram, capsys):
    shutil.copy(SAMPLE, diagram.parent / "ctrl.h")  # a diagram saved under an odd name
    before = _listing(diagram.parent)
    code, err = _run_export(capsys, diagram, *_CONTROLLER_C, "-o", str(diagram.parent / "ctrl.c"))
    assert code == 2 and len(err) == 1 and "ctrl.h is a diagram file" in err[0]
    assert _listing(diagram.parent) == before


def test_c_export_whose_source_fails_removes_the_header_it_wrote(diagram, monkeypatch):
    import loopwright.engine.export as export

    real_write = export._write

    def fail_on_source(path, data):
        if str(path).endswith(".c"):
            raise export.ExportError(f"{path}: cannot be written (disk full, simulated)")
        real_write(path, data)

    monkeypatch.setattr(export, "_write", fail_on_source)
    from loopwright.engine.export import controller_model

    model = controller_model(load(diagram), measured=["y_meas"], actuator=["u"], ts=0.001)
    before = _listing(diagram.parent)
    with pytest.raises(export.ExportError, match="disk full"):
        write_c(model, diagram.parent / "ctrl.c")
    assert _listing(diagram.parent) == before


@needs_posix
def test_export_onto_a_pipe_or_device_is_refused_not_replaced(diagram, capsys):
    # a rename over a device or a named pipe would put a regular file in its place
    fifo = diagram.parent / "pipe.json"
    os.mkfifo(fifo)
    code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(fifo))
    assert code == 2 and len(err) == 1 and "not a regular file" in err[0]
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


@pytest.mark.parametrize("out", ["", ".", "..", "sub/"])
def test_c_export_to_a_folder_name_is_one_line(diagram, capsys, monkeypatch, out):
    monkeypatch.chdir(diagram.parent)
    (diagram.parent / "sub").mkdir()
    before = _listing(diagram.parent.parent)
    code, err = _run_export(capsys, diagram, *_CONTROLLER_C, "--format", "c", "--prefix", "ctrl", "-o", out)
    assert code == 2 and len(err) == 1 and "folder" in err[0]
    assert _listing(diagram.parent.parent) == before


def test_json_export_to_a_name_ending_in_a_separator_is_refused(diagram, capsys):
    code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(diagram.parent / "loop.json") + os.sep)
    assert code == 2 and len(err) == 1 and "names a folder" in err[0]
    assert not (diagram.parent / "loop.json").exists()


def test_export_into_a_missing_folder_is_one_line(diagram, capsys):
    code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(diagram.parent / "nowhere" / "x.json"))
    assert code == 2 and len(err) == 1 and "does not exist" in err[0]


# ---------------------------------------------------------------------------------------
# saving: links, read-only files and folders
# ---------------------------------------------------------------------------------------
@needs_posix
def test_save_through_a_symlink_writes_its_target_and_keeps_the_link(diagram):
    link = diagram.parent / "link.lwd"
    link.symlink_to(diagram.name)
    d = load(link)
    d.meta["title"] = "saved through the link"
    save(d, link)
    assert link.is_symlink() and os.readlink(link) == diagram.name
    assert load(diagram).meta["title"] == "saved through the link"
    assert _temps(diagram) == [] and _temps(link) == []


@needs_posix
def test_design_write_through_a_symlink_updates_the_real_diagram(tmp_path, capsys):
    real = tmp_path / "drive.lwd"
    shutil.copy(SAMPLE.with_name("conveyor_flexible_drive.lwd"), real)
    link = tmp_path / "link.lwd"
    link.symlink_to(real.name)
    inode = real.stat().st_ino
    assert main(["design", str(link), "--write"]) == 0
    assert "written" in capsys.readouterr().out
    assert link.is_symlink() and os.readlink(link) == real.name
    assert real.stat().st_ino != inode  # the real file was replaced by the new text


@needs_posix
def test_read_only_diagram_is_refused_not_replaced(diagram, capsys):
    diagram.chmod(0o444)
    try:
        before = diagram.read_bytes()
        with pytest.raises(ProjectFileError, match="read-only; it was not replaced"):
            save(load(diagram), diagram)
        assert main(["design", str(diagram), "--write"]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and "read-only" in err[0]
        assert diagram.read_bytes() == before and (diagram.stat().st_mode & 0o777) == 0o444
        assert _temps(diagram) == []
    finally:
        diagram.chmod(0o644)


@needs_posix
def test_diagram_in_a_read_only_folder_is_refused(diagram):
    folder = diagram.parent
    folder.chmod(0o555)
    try:
        before = diagram.read_bytes()
        with pytest.raises(ProjectFileError, match="is read-only"):
            save(load(diagram), diagram)
        assert diagram.read_bytes() == before and _temps(diagram) == []
    finally:
        folder.chmod(0o755)


@needs_posix
def test_export_onto_a_read_only_file_is_refused(diagram, capsys):
    out = diagram.parent / "loop.json"
    out.write_text("{}")
    out.chmod(0o444)
    try:
        code, err = _run_export(capsys, diagram, "--what", "closed-loop", "-o", str(out))
        assert code == 2 and len(err) == 1 and "read-only" in err[0]
        assert out.read_text() == "{}"
    finally:
        out.chmod(0o644)


@needs_posix
def test_save_keeps_the_file_mode_and_syncs_the_folder_after_the_rename(diagram, monkeypatch):
    diagram.chmod(0o600)
    synced = []
    real_fsync = os.fsync

    def recording_fsync(fd):
        st = os.fstat(fd)
        synced.append((stat.S_ISDIR(st.st_mode), st.st_ino))
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", recording_fsync)
    save(load(diagram), diagram)
    assert diagram.stat().st_mode & 0o777 == 0o600
    assert synced[0] == (False, diagram.stat().st_ino)  # the new text, before the rename
    assert synced[-1] == (True, diagram.parent.stat().st_ino)  # the folder, after it


# ---------------------------------------------------------------------------------------
# leftovers of interrupted saves
# ---------------------------------------------------------------------------------------
@needs_posix
def test_next_save_removes_leftovers_of_that_file_only_and_none_in_use(diagram):
    import fcntl

    folder = diagram.parent
    dead = [folder / f".{diagram.name}.{tag}.tmp" for tag in ("abcd1234", "zz_9x0y1")]
    for p in dead:
        p.write_text("half a diagram")
    in_use = folder / f".{diagram.name}.busy0001.tmp"
    not_ours = [folder / ".other.lwd.abcd1234.tmp", folder / f".{diagram.name}.toolongname.tmp",
                folder / f"{diagram.name}.abcd1234.tmp", folder / f".{diagram.name}.abcd1234.tmp.bak"]
    for p in [in_use, *not_ours]:
        p.write_text("keep me")
    with open(in_use, "rb") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)  # as a save running in another process holds it
        save(load(diagram), diagram)
        assert all(not p.exists() for p in dead)
        assert in_use.exists() and all(p.exists() for p in not_ours)
    save(load(diagram), diagram)
    assert not in_use.exists() and all(p.exists() for p in not_ours)


# A host process loads the diagram once; for each kill it forks a saver that saves in a
# loop (counting from the number it is sent) until the test kills it with SIGKILL.
_SAVER_HOST = """
import os, sys
from loopwright.engine.project import load, save
diagram = load(sys.argv[1])
for line in sys.stdin:
    pid = os.fork()
    if pid == 0:
        try:
            count = int(line)
            while True:
                diagram.meta["save_count"] = count
                save(diagram, sys.argv[2])
                count += 1
        finally:
            os._exit(1)
    print(pid, flush=True)
    os.waitpid(pid, 0)
    print("reaped", flush=True)
"""
_MARK = -987654321


def _large_diagram(path: Path) -> None:
    d = load(SAMPLE)
    rng = np.random.default_rng(20)
    n = 250  # about 2 MB of JSON: a save takes a while, so kills land in every phase
    d.add_block("dynamic", "bulk", {"A": rng.normal(size=(n, n)).tolist(), "B": rng.normal(size=(n, 1)).tolist(),
                                    "C": rng.normal(size=(1, n)).tolist(), "D": [[0.0]]})
    d.meta["save_count"] = -1
    save(d, path)


@needs_posix
def test_killed_saves_never_damage_the_file_and_the_next_save_clears_leftovers(tmp_path):
    kills = int(os.environ.get("LOOPWRIGHT_SAVE_KILLS", "30"))
    base, target = tmp_path / "base.lwd", tmp_path / "work" / "big.lwd"
    target.parent.mkdir()
    _large_diagram(base)
    shutil.copy(base, target)
    reference = load(base)
    reference.meta["save_count"] = _MARK
    template = dumps(reference)  # every saved version is this text with its own count
    rng = np.random.default_rng(7)
    seen_leftovers = damaged = 0
    versions = set()
    host = subprocess.Popen([sys.executable, "-c", _SAVER_HOST, str(base), str(target)], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    try:
        for k in range(kills):
            host.stdin.write(f"{1000 * k}\n")
            host.stdin.flush()
            saver = int(host.stdout.readline())
            time.sleep(rng.uniform(0.0, 0.5))
            os.kill(saver, signal.SIGKILL)
            assert host.stdout.readline().strip() == "reaped"
            text = target.read_text(encoding="utf-8")
            try:
                count = loads(text).meta["save_count"]
            except (ProjectFileError, KeyError):
                damaged += 1
                continue
            damaged += text != template.replace(f'"save_count": {_MARK}', f'"save_count": {count}')
            versions.add(count)
            seen_leftovers += len(_temps(target))
    finally:
        host.stdin.close()
        host.wait(timeout=60)
        host.stdout.close()
    print(f"{kills} kills: {damaged} damaged files, {seen_leftovers} leftover temporary files seen after a kill, "
          f"{len(versions)} different saved versions found")
    assert damaged == 0
    save(load(target), target)
    assert _temps(target) == []
    assert sorted(p.name for p in target.parent.iterdir()) == ["big.lwd"]
    assert len(versions) > 1
