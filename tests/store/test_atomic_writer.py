"""The one atomic writer: regular files only, the umask honoured, one writer at a time, no stale leftovers.

Devices and named pipes are made inside a temporary folder (a FIFO with ``os.mkfifo``, a
device as a link to ``/dev/null``); after every refusal ``/dev/null`` must still be the
system's character device, since these tests may run as root, where a rename over it would
succeed.
"""

from __future__ import annotations

import os
import stat
import subprocess
import sys
import textwrap
import threading

import pytest

from stages import atomic
from stages.atomic import OutputLock, atomic_output, write_atomic
from stages.errors import OutputError


def devnull_is_intact() -> bool:
    info = os.lstat("/dev/null")
    return stat.S_ISCHR(info.st_mode) and (os.major(info.st_rdev), os.minor(info.st_rdev)) == (1, 3)


def write_bytes(path, data: bytes = b"new") -> None:
    write_atomic(path, lambda handle: handle.write(data), what="test file")


@pytest.fixture()
def fifo(tmp_path):
    path = tmp_path / "pipe"
    os.mkfifo(path)
    return path


def test_a_named_pipe_is_refused_and_left_a_pipe(fifo):
    with pytest.raises(OutputError, match="is a named pipe \\(FIFO\\), not a regular file"):
        write_bytes(fifo)
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def test_a_link_to_a_device_is_refused_and_the_device_untouched(tmp_path):
    link = tmp_path / "null"
    link.symlink_to("/dev/null")
    with pytest.raises(OutputError, match="is a character device, not a regular file"):
        write_bytes(link)
    assert link.is_symlink() and os.readlink(link) == "/dev/null"
    assert devnull_is_intact()


def test_a_folder_a_dangling_link_and_a_missing_folder_are_refused(tmp_path):
    with pytest.raises(OutputError, match="is a folder"):
        write_bytes(tmp_path)
    dangling = tmp_path / "dangling"
    dangling.symlink_to(tmp_path / "nowhere")
    with pytest.raises(OutputError, match="symbolic link to nothing"):
        write_bytes(dangling)
    with pytest.raises(OutputError, match="does not exist"):
        write_bytes(tmp_path / "absent" / "file")


def test_a_link_to_a_regular_file_is_kept_and_its_target_replaced(tmp_path):
    target = tmp_path / "real.txt"
    target.write_bytes(b"old")
    link = tmp_path / "link.txt"
    link.symlink_to(target)
    write_bytes(link)
    assert link.is_symlink() and target.read_bytes() == b"new"


def test_a_new_file_gets_the_mode_the_umask_gives(tmp_path):
    # in a child process: the umask is process-wide, and the writer must never change it
    code = textwrap.dedent(f"""
        import os, stat
        from stages.atomic import write_atomic
        for mask in (0o022, 0o077, 0o002):
            os.umask(mask)
            path = os.path.join({str(tmp_path)!r}, f"new-{{mask:o}}.bin")
            write_atomic(path, lambda h: h.write(b"x"))
            print(mask, stat.S_IMODE(os.stat(path).st_mode), os.umask(mask))
    """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    rows = [tuple(map(int, line.split())) for line in done.stdout.splitlines()]
    assert len(rows) == 3, done.stderr
    for mask, mode, after in rows:
        assert mode == 0o666 & ~mask and after == mask


def test_a_replaced_file_keeps_its_mode(tmp_path):
    path = tmp_path / "kept"
    path.write_bytes(b"old")
    os.chmod(path, 0o640)
    write_bytes(path)
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o640 and path.read_bytes() == b"new"


def test_stale_temporary_files_of_the_same_output_are_removed_and_others_kept(tmp_path):
    path = tmp_path / "out.chain"
    stale = [tmp_path / ".out.chain.abc123.tmp", tmp_path / ".out.chain.q1w2e3r4t5y6.tmp"]
    other = [tmp_path / ".other.chain.abc123.tmp", tmp_path / ".out.chainx.abc123.tmp", tmp_path / "out.chain.tmp"]
    for leftover in stale + other:
        leftover.write_bytes(b"half")
    write_bytes(path)
    assert not any(p.exists() for p in stale) and all(p.exists() for p in other)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([path.name, *(p.name for p in other)])


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    path = tmp_path / "out.bin"
    path.write_bytes(b"precious")

    def fail(handle):
        handle.write(b"half")
        raise OSError(28, "No space left on device")

    with pytest.raises(OutputError, match="the disk is full"):
        write_atomic(path, fail)
    assert path.read_bytes() == b"precious" and sorted(tmp_path.iterdir()) == [path]


def test_standard_output_is_written_as_it_is(capfdbinary):
    write_bytes("-", b"to stdout")
    assert capfdbinary.readouterr().out == b"to stdout"


def test_a_second_process_writing_the_same_output_is_refused(tmp_path):
    path = tmp_path / "shared.chain"
    code = textwrap.dedent(f"""
        import sys, time
        from stages.atomic import OutputLock
        with OutputLock({str(path)!r}):
            print("held", flush=True)
            sys.stdin.readline()
    """)
    holder = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(OutputError, match=f"another remnant \\(process {holder.pid}\\) is writing it"), \
                OutputLock(path, what="chain file"):
            pass
        assert not path.exists()
    finally:
        holder.communicate("done\n", timeout=120)
    write_bytes(path)  # once the first writer is done, the next one writes
    assert path.read_bytes() == b"new" and not os.path.exists(atomic.lock_path(str(path)))


def test_threads_of_one_process_take_turns(tmp_path):
    path = tmp_path / "turns.txt"
    order: list[str] = []
    inside = threading.Event()
    release = threading.Event()

    def first() -> None:
        with OutputLock(path):
            order.append("first in")
            inside.set()
            release.wait(timeout=60)
            order.append("first out")

    thread = threading.Thread(target=first)
    thread.start()
    inside.wait(timeout=60)
    second = threading.Thread(target=lambda: (write_bytes(path), order.append("second wrote")))
    second.start()
    release.set()
    thread.join(timeout=60)
    second.join(timeout=60)
    assert order == ["first in", "first out", "second wrote"]


def test_text_output_keeps_newlines_as_written(tmp_path):
    path = tmp_path / "p.csv"
    with atomic_output(path, text=True) as handle:
        handle.write("a,b\n1,2\n")
    assert path.read_bytes() == b"a,b\n1,2\n"
