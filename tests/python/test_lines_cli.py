"""`glowsim lines` on bad input: a clear message on stderr, a non-zero exit, and never a panic.

(These run the built binary, so they live with the other checks that do; the predictor's own error values
are tested in tests/tests/predict_properties.rs.)
"""

import json

import pytest

from conftest import run_glowsim

# (arguments after `glowsim lines`, words the message must contain, case-insensitive)
BAD_INPUT = [
    (["--lower", "3", "--upper", "2"], ["upper", "lower"]),
    (["--lower", "2", "--upper", "2"], ["upper", "lower"]),
    (["--upper", "41"], ["40"]),
    (["--lower", "0", "--upper", "2"], ["1", "40"]),
    (["--lower=-2"], ["lower"]),
    (["--upper", "99999999999999999999"], ["upper"]),
    (["--upper", "3-"], ["upper"]),
    (["--upper", "5-3"], ["upper"]),
    (["--upper", "abc"], ["upper"]),
    (["--nucleus", "Xx"], ["nucleus", "known"]),
    (["--nucleus="], ["nucleus"]),
    (["--nucleus", "H,Xx"], ["nucleus"]),
    (["--from-nm", "700", "--to-nm", "400"], ["window"]),
    (["--from-nm=-1"], ["from-nm"]),
    (["--from-nm", "1e400"], ["from-nm"]),
    (["--from-nm", "nan"], ["from-nm"]),
    (["--to-nm", "1e30"], ["to-nm"]),
    (["--air-temp-c", "500"], ["temperature"]),
    (["--air-temp-c=-300"], ["temperature"]),
    (["--air-temp-c", "nan"], ["temp"]),
    (["--air-temp-c", "inf"], ["temp"]),
    (["--air-pressure-pa", "1000000"], ["pressure"]),
    (["--air-pressure-pa=-5"], ["pa"]),
    (["--air-pressure-pa", "0"], ["pressure"]),
    (["--air-rh", "150"], ["humidity"]),
    (["--air-rh=-1"], ["%"]),
    (["--no-such-option"], ["no-such-option"]),
]


@pytest.mark.parametrize("args,words", BAD_INPUT, ids=[" ".join(a) for a, _ in BAD_INPUT])
def test_bad_input_is_refused_clearly(glowsim, args, words):
    done = run_glowsim(glowsim, ["lines", *args])
    err = done.stderr
    assert done.returncode not in (0, 101), f"exit {done.returncode} (101 = panic): {err}"
    assert "panicked" not in err and "RUST_BACKTRACE" not in err, err
    assert "error" in err.lower(), err
    for w in words:
        assert w.lower() in err.lower(), f"message does not mention {w!r}: {err}"
    assert done.stdout.strip() == "", f"partial output on error: {done.stdout[:200]}"


def test_bad_input_with_json_gives_no_json(glowsim):
    done = run_glowsim(glowsim, ["lines", "--json", "--lower", "3", "--upper", "2"])
    assert done.returncode != 0 and done.stdout.strip() == ""


def test_every_line_of_every_nucleus_in_one_call(glowsim):
    # The full table (12 nuclei x 780 lines) comes out as valid JSON, each line once.
    nuclei = "H,D,T,He3,He4,Li6,Li7,Be9,B11,C12,N14,O16"
    done = run_glowsim(glowsim, ["lines", "--nucleus", nuclei, "--lower", "1-40", "--upper", "1-40", "--json"])
    assert done.returncode == 0, done.stderr
    entries = json.loads(done.stdout)
    keys = {(e["nucleus"], e["lower"], e["upper"]) for e in entries}
    assert len(entries) == len(keys) == 12 * 780
    for e in entries:
        assert set(e) >= {"nucleus", "lower", "upper", "vacuum_nm", "air_nm", "wavenumber_per_cm", "energy_ev"}
        assert 1 <= e["lower"] < e["upper"] <= 40
