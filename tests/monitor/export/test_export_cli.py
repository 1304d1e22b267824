"""`tunetrace export` as a user runs it: files, refusals in one sentence, the README recipe."""

from __future__ import annotations

import re
import subprocess

import pytest

from monitor.cli import main

WEIGH = """
rate_hz = 250.0
[[stage]]
kind = "median"
window = 5
channels = ["load"]
[[stage]]
kind = "butterworth"
order = 4
cutoff_hz = 12.0
channels = ["load"]
[[stage]]
kind = "notch"
freq_hz = 50.0
q = 5.0
channels = ["vib"]
"""
TOO_LOW = 'rate_hz = 250.0\n[[stage]]\nkind = "butterworth"\norder = 4\ncutoff_hz = 1.0\n'


@pytest.fixture
def chain(tmp_path):
    def write(text: str, name: str = "weigh.toml"):
        path = tmp_path / name
        path.write_text(text)
        return path
    return write


def export(capsys, *argv) -> tuple[int, str, str]:
    code = main(["export", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def one_sentence(err: str) -> None:
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("tunetrace export: "), err
    assert "Traceback" not in err


@pytest.mark.parametrize("target,extra,expect", [
    ("c-q15", ["--full-scale", "load=50,vib=4"], "bit-exact"),
    ("c-q31", ["--full-scale", "50"], "bit-exact"),
    ("c-float", [], "of peak"),
])
def test_export_writes_files_and_the_readme_recipe_passes(chain, tmp_path, capsys, gcc,
                                                          target, extra, expect):
    out = tmp_path / "fw"
    code, stdout, err = export(capsys, chain(WEIGH), "--target", target, "-o", out, *extra)
    assert code == 0, err
    assert f"Quantization for {target}" in stdout and "wrote" in stdout
    assert "control loop" in stdout
    names = sorted(p.name for p in out.iterdir())
    assert names == ["README.md", "weigh.c", "weigh.h", "weigh_selftest.c", "weigh_vectors.csv"]
    readme = (out / "README.md").read_text()
    assert "safety function" in readme and "lag" in readme          # the caution
    assert "weigh_load_step" in readme and "## Quantization report" in readme
    if target != "c-float":
        assert "full scale" in readme and "| load | +-50 |" in readme
        assert "#define WEIGH_LOAD_FULL_SCALE 50.0" in (out / "weigh.h").read_text()
    assert "lag (group delay) at 12 Hz" in readme
    # run the README's shell recipe exactly as written
    recipe = re.search(r"```sh\n(.*?)```", readme, re.S).group(1)
    done = subprocess.run(["bash", "-e", "-c", recipe], cwd=out, capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stdout + done.stderr
    assert expect in done.stdout


def test_fixed_point_needs_a_full_scale(chain, tmp_path, capsys):
    code, _, err = export(capsys, chain(WEIGH), "--target", "c-q15", "-o", tmp_path / "out")
    assert code == 2 and "--full-scale" in err
    one_sentence(err)
    assert not (tmp_path / "out").exists()
    code, _, err = export(capsys, chain(WEIGH), "--target", "c-q15", "-o", tmp_path / "out",
                          "--full-scale", "load=50")
    assert code == 2 and "no value for channel vib" in err
    code, _, err = export(capsys, chain(WEIGH), "--target", "c-q15", "-o", tmp_path / "out",
                          "--full-scale", "load=-3,vib=4")
    assert code == 2 and "positive number" in err
    code, _, err = export(capsys, chain(WEIGH), "--target", "c-q15", "-o", tmp_path / "out",
                          "--full-scale", "load=3,belt=4")
    assert code == 2 and "'belt'" in err


def test_existing_files_are_kept_without_force(chain, tmp_path, capsys):
    path = chain(WEIGH)
    out = tmp_path / "out"
    assert export(capsys, path, "--target", "c-float", "-o", out)[0] == 0
    before = (out / "weigh.c").read_text()
    (out / "weigh.c").write_text("/* mine */")
    code, _, err = export(capsys, path, "--target", "c-float", "-o", out)
    assert code == 2 and "already exists" in err and "--force" in err
    assert (out / "weigh.c").read_text() == "/* mine */"
    assert export(capsys, path, "--target", "c-float", "-o", out, "--force")[0] == 0
    assert (out / "weigh.c").read_text() == before


def test_q15_refuses_a_chain_it_cannot_hold_unless_accepted(chain, tmp_path, capsys):
    path = chain(TOO_LOW, "slow.toml")
    code, out, err = export(capsys, path, "--target", "c-q15", "-o", tmp_path / "a",
                            "--full-scale", "1")
    assert code == 2 and "c-q31" in err and "--accept-quantization" in err
    one_sentence(err)
    assert "PROBLEM" in out and not (tmp_path / "a").exists()
    code, _, err = export(capsys, path, "--target", "c-q15", "-o", tmp_path / "a",
                          "--full-scale", "1", "--accept-quantization")
    assert code == 0 and "WARNING" in err
    readme = (tmp_path / "a" / "README.md").read_text()
    assert "WARNING: exported although" in readme and "c-q31" in readme
    assert export(capsys, path, "--target", "c-q31", "-o", tmp_path / "b",
                  "--full-scale", "1")[0] == 0


def test_unstable_quantization_is_always_refused(chain, tmp_path, capsys):
    path = chain(TOO_LOW.replace("1.0", "0.05"), "creep.toml")
    code, _, err = export(capsys, path, "--target", "c-q15", "-o", tmp_path / "a",
                          "--full-scale", "1", "--accept-quantization")
    assert code == 2 and "unit circle" in err
    one_sentence(err)


@pytest.mark.parametrize("argv,needle", [
    (["--name", "9lives"], "C identifier"),
    (["--name", "int"], "C identifier"),
    (["--double", "--target", "c-q31", "--full-scale", "1"], "--double"),
    (["--vectors-seconds", "0"], "--vectors-seconds"),
    (["--channels", "load"], "vib"),
])
def test_bad_options_get_one_sentence(chain, tmp_path, capsys, argv, needle):
    base = ["--target", "c-float"] if "--target" not in argv else []
    code, _, err = export(capsys, chain(WEIGH), *base, "-o", tmp_path / "o", *argv)
    assert code == 2 and needle in err
    one_sentence(err)


def test_chain_problems_get_one_sentence(chain, tmp_path, capsys):
    code, _, err = export(capsys, chain('[[stage]]\nkind = "ema"\nalpha = 0.5\n', "norate.toml"),
                          "--target", "c-float", "-o", tmp_path / "o")
    assert code == 2 and "--rate" in err
    one_sentence(err)
    bad = chain('[[stage]]\nkind = "rc-lowpass"\ncutoff_hz = 300.0\n', "fast.toml")
    code, _, err = export(capsys, bad, "--rate", "250", "--target", "c-float", "-o",
                          tmp_path / "o")
    assert code == 2 and "stage 1" in err and "cutoff_hz" in err
    one_sentence(err)


def test_a_chain_for_every_channel_exports_one_generic_chain(chain, tmp_path, capsys):
    path = chain('rate_hz = 100.0\n[[stage]]\nkind = "ema"\nalpha = 0.3\n', "smooth.toml")
    assert export(capsys, path, "--target", "c-float", "-o", tmp_path / "g")[0] == 0
    header = (tmp_path / "g" / "smooth.h").read_text()
    assert "smooth_signal_step(smooth_signal_chain *c, smooth_sample x);" in header
    assert export(capsys, path, "--target", "c-float", "-o", tmp_path / "n",
                  "--channels", "load,vib", "--name", "belt")[0] == 0
    header = (tmp_path / "n" / "belt.h").read_text()
    assert "belt_load_step" in header and "belt_vib_step" in header
    vectors = (tmp_path / "n" / "belt_vectors.csv").read_text().splitlines()
    assert vectors[0] == "load,vib,load_filtered,vib_filtered"


def test_a_mixed_chain_adds_the_generic_chain_for_other_channels(chain, tmp_path, capsys):
    text = WEIGH + '[[stage]]\nkind = "gain"\nscale = 2.0\n'
    assert export(capsys, chain(text), "--target", "c-float", "-o", tmp_path / "m")[0] == 0
    header = (tmp_path / "m" / "weigh.h").read_text()
    assert "weigh_load_step" in header and "weigh_vib_step" in header
    assert "/* channel signal: stage 4: gain */" in header
    readme = (tmp_path / "m" / "README.md").read_text()
    assert "every channel the chain file does not name" in readme


def test_float32_too_coarse_suggests_double(chain, tmp_path, capsys):
    # a 0.2 Hz band-pass at 100 Hz (1000 Hz rate): poles so close to the unit circle,
    # away from z = 1, that neither float32 structure holds it; double does
    path = chain('rate_hz = 1000.0\n[[stage]]\nkind = "chebyshev1"\nband = "bandpass"\n'
                 'order = 4\nlow_hz = 100.0\nhigh_hz = 100.2\nripple_db = 0.5\n', "creep.toml")
    code, out, err = export(capsys, path, "--target", "c-float", "-o", tmp_path / "f")
    assert code == 2 and "use --double" in err and "decimating" in err
    assert "of peak on the test vectors" in err and "tolerance 1e-05" in err
    one_sentence(err)
    assert not (tmp_path / "f").exists()
    assert export(capsys, path, "--target", "c-float", "--double", "-o", tmp_path / "f")[0] == 0
    assert "typedef double creep_sample;" in (tmp_path / "f" / "creep.h").read_text()


def test_channel_names_become_c_names_that_cannot_clash(chain, tmp_path, capsys, gcc):
    path = chain('rate_hz = 250.0\n[[stage]]\nkind = "median"\nwindow = 3\n', "m.toml")
    assert export(capsys, path, "--target", "c-q15", "--full-scale", "1", "-o", tmp_path / "c",
                  "--channels", "median,9x,temp-1")[0] == 0
    header = (tmp_path / "c" / "m.h").read_text()
    for name in ("m_median_ch_step", "m__9x_step", "m_temp_1_step"):
        assert name in header
    done = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-o",
                           "st", "m_selftest.c", "m.c"], cwd=tmp_path / "c", capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    code, _, err = export(capsys, path, "--target", "c-float", "-o", tmp_path / "d",
                          "--channels", "a-b,a_b")
    assert code == 2 and "clashing C names" in err
