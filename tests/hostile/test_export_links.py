"""Planted symbolic links around export's and apply's outputs: nothing is ever written
outside the chosen folder or through a link, and outputs are replaced whole.

Real symlinks on the real file system; the commands run as a user runs them
(monitor.cli.main). A link at a temporary name must make no difference at all; a link
at a final name is refused without --force and replaced itself (target untouched) with it.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

from monitor.cli import main

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "replay"))
from replay_helpers import weigh_station, write_recording  # noqa: E402

CHAIN = 'rate_hz = 250.0\n[[stage]]\nkind = "butterworth"\norder = 2\ncutoff_hz = 12.0\n'
GAIN = '[[stage]]\nkind = "gain"\nscale = 2.0\n'
NAMES = ("weigh.h", "weigh.c", "weigh_selftest.c", "weigh_vectors.csv", "README.md")
SECRET = "the board's calibration table, not to be touched\n"


def tree(root: Path) -> dict[str, bytes | str]:
    """Every entry under root: file bytes, or 'link -> target' for links (not followed)."""
    found: dict[str, bytes | str] = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            path = Path(dirpath) / name
            key = str(path.relative_to(root))
            if path.is_symlink():
                found[key] = f"link -> {os.readlink(path)}"
            elif path.is_file():
                found[key] = path.read_bytes()
    return found


def one_sentence(err: str, verb: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"tunetrace {verb}: "), err
    assert "Traceback" not in err
    return lines[0]


@pytest.fixture
def world(tmp_path):
    """A chain file, an empty output folder and, outside it, a file a link may aim at."""
    chain = tmp_path / "weigh.toml"
    chain.write_text(CHAIN)
    out = tmp_path / "fw"
    out.mkdir()
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    victim = elsewhere / "calibration.h"
    victim.write_text(SECRET)
    return chain, out, elsewhere, victim


def export(capsys, chain, out, *extra) -> tuple[int, str, str]:
    code = main(["export", str(chain), "--target", "c-float", "-o", str(out), *extra])
    got = capsys.readouterr()
    return code, got.out, got.err


def test_links_at_temporary_names_are_never_followed(world, capsys):
    # export once wrote NAME.part beside each file and renamed it: a link planted there
    # made it write through the link; here every such name, and a dangling one, is planted
    chain, out, elsewhere, victim = world
    for name in NAMES:
        (out / f"{name}.part").symlink_to(victim)
        (out / f".{name}.tmp").symlink_to(elsewhere / f"new-{name}")
    before = tree(elsewhere)
    code, _, err = export(capsys, chain, out)
    assert code == 0, err
    assert tree(elsewhere) == before                       # nothing written outside fw/
    assert victim.read_text() == SECRET
    for name in NAMES:
        assert (out / name).is_file() and not (out / name).is_symlink()
        assert (out / f"{name}.part").is_symlink()         # planted links left as they were
    leftovers = [p.name for p in out.iterdir() if p.name.endswith(".tmp") and
                 not p.is_symlink()]
    assert leftovers == []


def test_an_exclusive_create_skips_a_name_planted_at_the_next_temporary_name(
        world, monkeypatch):
    # the temporary names are random; make the first one predictable and plant a link
    # there: the exclusive, no-follow create must refuse it and take another name
    import replay.outputfile as outputfile
    from monitor.export import write_files

    chain, out, elsewhere, victim = world
    draws = iter(["aaaa0000", "bbbb1111", "cccc2222"])
    monkeypatch.setattr(outputfile.secrets, "token_hex", lambda n: next(draws))
    (out / ".weigh.h.aaaa0000.tmp").symlink_to(victim)
    write_files(out, {"weigh.h": "/* filter */\n"})
    assert victim.read_text() == SECRET
    assert (out / "weigh.h").read_text() == "/* filter */\n"
    assert (out / ".weigh.h.aaaa0000.tmp").is_symlink()
    assert not (out / ".weigh.h.bbbb1111.tmp").exists()   # renamed into place


@pytest.mark.parametrize("dangling", [False, True])
def test_a_link_at_an_output_name_is_refused_without_force(world, capsys, dangling):
    chain, out, elsewhere, victim = world
    target = elsewhere / "nothing-here.h" if dangling else victim
    (out / "weigh.h").symlink_to(target)
    before = tree(elsewhere)
    code, _, err = export(capsys, chain, out)
    line = one_sentence(err, "export")
    assert code == 2 and "symbolic link" in line and "--force" in line
    assert tree(elsewhere) == before and target.exists() != dangling
    assert (out / "weigh.h").is_symlink()
    assert sorted(p.name for p in out.iterdir()) == ["weigh.h"]      # nothing else written


def test_force_replaces_the_link_itself_never_its_target(world, capsys):
    chain, out, elsewhere, victim = world
    (out / "weigh.h").symlink_to(victim)
    (out / "weigh.c").symlink_to(chain)                  # even a link to the input chain
    code, _, err = export(capsys, chain, out, "--force")
    assert code == 0, err
    assert victim.read_text() == SECRET and chain.read_text() == CHAIN
    assert not (out / "weigh.h").is_symlink() and "weigh" in (out / "weigh.h").read_text()
    assert not (out / "weigh.c").is_symlink()


def test_files_keep_the_umask_mode_not_a_private_temporary_mode(world, capsys):
    chain, out, *_ = world
    old = os.umask(0o022)
    try:
        assert export(capsys, chain, out)[0] == 0
    finally:
        os.umask(old)
    assert {oct((out / n).stat().st_mode & 0o777) for n in NAMES} == {"0o644"}


# -- apply's output --------------------------------------------------------------------

@pytest.fixture
def recording(tmp_path):
    path = tmp_path / "rec.csv"
    write_recording(path, weigh_station(500))
    gain = tmp_path / "gain.toml"
    gain.write_text(GAIN)
    return path, gain


def apply(capsys, rec, chain, out, *extra) -> tuple[int, str, str]:
    code = main(["apply", str(rec), "--chain", str(chain), "-o", str(out), *extra])
    got = capsys.readouterr()
    return code, got.out, got.err


def test_apply_force_replaces_a_planted_link_not_its_target(world, recording, capsys):
    _, out, elsewhere, victim = world
    rec, gain = recording
    (out / "filtered.csv").symlink_to(victim)
    code, _, err = apply(capsys, rec, gain, out / "filtered.csv")
    assert code == 2 and "already exists" in one_sentence(err, "apply")
    assert victim.read_text() == SECRET
    code, _, err = apply(capsys, rec, gain, out / "filtered.csv", "--force")
    assert code == 0, err
    assert victim.read_text() == SECRET                  # the old code wrote through the link
    assert not (out / "filtered.csv").is_symlink()
    assert (out / "filtered.csv").read_text().count("\n") > 500


def test_apply_interrupted_with_force_keeps_the_old_output_whole(world, recording):
    from filters.chainfile import parse_chain
    from replay.offline import apply_chain
    from replay.reader import read_recording

    _, out, _, _ = world
    rec, _ = recording
    target = out / "filtered.csv"
    target.write_text("an earlier result\n")

    def interrupt(fraction: float) -> None:
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        apply_chain(read_recording(rec, chunk_rows=64), parse_chain(GAIN), target,
                    force=True, progress=interrupt)
    assert target.read_text() == "an earlier result\n"   # the old code deleted it
    assert sorted(p.name for p in out.iterdir()) == ["filtered.csv"]   # no temporary left


def test_apply_without_force_is_refused_before_it_runs_and_leaves_no_reservation(
        world, recording):
    from filters.chainfile import parse_chain
    from replay.offline import apply_chain
    from replay.reader import read_recording

    _, out, _, _ = world
    rec, _ = recording
    target = out / "filtered.csv"

    def interrupt(fraction: float) -> None:
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        apply_chain(read_recording(rec, chunk_rows=64), parse_chain(GAIN), target,
                    progress=interrupt)
    assert list(out.iterdir()) == []                      # the reserved name is released
    (out / "filtered.csv").symlink_to(out / "missing.csv")   # dangling: still taken
    with pytest.raises(FileExistsError):
        apply_chain(read_recording(rec), parse_chain(GAIN), target)
    assert (out / "filtered.csv").is_symlink() and not (out / "missing.csv").exists()


def test_apply_writes_into_a_named_pipe_and_refuses_a_planted_link_to_one(
        world, recording, capsys):
    # a stream cannot be replaced whole: written into, never renamed over (renaming
    # over a device node or a pipe would destroy it); a link to one outside /dev is
    # refused, since a planted link could aim at any device
    import stat
    import threading

    _, out, elsewhere, _ = world
    rec, gain = recording
    pipe = elsewhere / "to-plotter"
    os.mkfifo(pipe)
    received: list[bytes] = []
    reader = threading.Thread(target=lambda: received.append(pipe.read_bytes()), daemon=True)
    reader.start()
    code, _, err = apply(capsys, rec, gain, pipe, "--force")
    reader.join(10)
    assert code == 0, err
    assert stat.S_ISFIFO(os.lstat(pipe).st_mode)          # still the pipe
    assert received and received[0].count(b"\n") > 500
    (out / "filtered.csv").symlink_to(pipe)
    code, _, err = apply(capsys, rec, gain, out / "filtered.csv", "--force")
    line = one_sentence(err, "apply")
    assert code == 2 and "symbolic link to a device or a pipe" in line
    assert (out / "filtered.csv").is_symlink() and stat.S_ISFIFO(os.lstat(pipe).st_mode)
