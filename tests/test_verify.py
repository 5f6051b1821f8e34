"""affix verify: counts per artefact and vector set, exit 0 only with no mismatch.

The C side is cross-checked against Python's exact integers (Python's >>
floors: Language Reference §6.8 "Shifting operations") through the integer
reference, and the MicroPython side runs in the real MicroPython unix port.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from affix.emit.writer import emit
from affix.errors import VerificationError
from affix.verify.check import verify
from affix.verify.vectors import corners, vector_sets
from conftest import rehash, require, run_affix
from plans import random_plan


def test_corner_sets_follow_the_box():
    lo, hi = np.array([-3, 0, 10]), np.array([4, 255, 11])
    box = corners(lo, hi, np.random.default_rng(0))
    assert box.shape == (8, 3)
    assert {tuple(r) for r in box.tolist()} == {(a, b, c) for a in (-3, 4) for b in (0, 255) for c in (10, 11)}
    # More than 16 inputs: 2**16 random corners plus each input at each extreme.
    m = 17
    wide = corners(np.zeros(m, dtype=np.int64), np.full(m, 9, dtype=np.int64), np.random.default_rng(0))
    assert len(wide) == 2**16 + m * 2 * 64
    assert np.isin(wide[: 2**16], [0, 9]).all()


def test_beyond_the_box_reaches_the_type_limits():
    sets = vector_sets([(-5, 5), (0, 9)], "int8_t", n_random=100, seed=0)
    beyond = sets["beyond the box"].chunk(0)
    assert beyond.min() == -128 and beyond.max() == 127
    random = sets["random"].chunk(0)
    assert len(random) == 100
    assert ((random >= [-5, 0]) & (random <= [5, 9])).all()


def test_random_vectors_come_in_bounded_chunks_that_repeat():
    from affix.verify.vectors import CHUNK_ROWS

    n = 2 * CHUNK_ROWS + 5
    sets = vector_sets([(-5, 5)], "int8_t", n_random=n, seed=4)
    chunks = list(sets["random"].chunks())
    assert [len(c) for c in chunks] == [CHUNK_ROWS, CHUNK_ROWS, 5]
    assert np.array_equal(sets["random"].chunk(1), chunks[1])  # same seed, same vectors: a failure can be replayed
    assert not np.array_equal(chunks[0][:5], chunks[1][:5])


def test_cli_emit_then_verify_passes(tmp_path):
    require("gcc")
    random_plan(4, 6, 6, ranges="int16").save(tmp_path / "plan.json")
    # Relative paths, as a user types them: the build must not depend on its working folder.
    done = run_affix("emit", "plan.json", "--lang", "c", "--style", "unrolled", "--name", "wrist", "--out", "out",
                     cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    done = run_affix("verify", "out", "--vectors", "20000", cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    lines = done.stdout.splitlines()
    assert any("corners" in line and line.split()[-2:] == ["64", "0"] for line in lines)  # 2**6 corners
    assert any("random" in line and line.split()[-2:] == ["20000", "0"] for line in lines)
    assert lines[-1].startswith("PASS: 0 mismatches")


@pytest.mark.bad_input("verify")
def test_a_wrong_constant_is_caught_and_shown(tmp_path):
    require("gcc")
    plan = random_plan(4, 3, 2, ranges="int16")
    emit(plan, lang="c", name="probe", out_dir=tmp_path)
    source = tmp_path / "probe.c"
    first = plan.coefficients[0][0]
    text = source.read_text()
    assert f"{{ {first}," in text
    source.write_text(text.replace(f"{{ {first},", f"{{ {first // 2 + 77},", 1))
    rehash(tmp_path / "probe.manifest.json")
    with pytest.raises(VerificationError) as caught:
        verify(tmp_path, vectors=5000)
    report = caught.value.report
    assert report.mismatches > 0
    bad = next(r for r in report.results if r.mismatches)
    y, expected, actual = bad.examples[0]
    assert plan.integer_estimator().evaluate(np.array(y)).tolist() == expected != actual

    done = run_affix("verify", tmp_path, "--vectors", "5000")
    assert done.returncode == 1
    assert "expected" in done.stdout and "FAIL" in done.stdout
    assert done.stderr.startswith("affix: error:") and len(done.stderr.strip().splitlines()) == 1
    assert "C probe_estimate()" in done.stderr  # the entry point at fault


@pytest.mark.bad_input("verify")
def test_missing_manifest_is_a_file_error(tmp_path):
    done = run_affix("verify", tmp_path)
    assert done.returncode == 2
    assert "manifest" in done.stderr and "Traceback" not in done.stderr


@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_float32_is_checked_bit_for_bit(tmp_path, style):
    require("gcc")
    plan = random_plan(9, 4, 3, ranges="uint16")
    emit(plan, lang="c", arith="float32", style=style, name="probe", out_dir=tmp_path)
    report = verify(tmp_path, vectors=50000)  # raises VerificationError on any mismatch
    assert [r.artefact for r in report.results][0] == f"C probe_estimate() (float32, {style})"
    assert report.evaluations > 50000


def test_float32_reference_differs_from_fused_multiply_add():
    # The contract rounds each product before the add; a fused multiply-add
    # (IEEE 754-2008 fusedMultiplyAdd) rounds once.  Over many vectors the two
    # must disagree somewhere, else the bit-exact check could not see fusing.
    from affix.float32_arithmetic import Float32Estimator

    plan = random_plan(9, 4, 3, ranges="uint16")
    reference = Float32Estimator(plan.gain, plan.offset, plan.input_ranges)
    y = np.random.default_rng(1).integers([r[0] for r in plan.input_ranges], [r[1] for r in plan.input_ranges],
                                          size=(20000, 4), endpoint=True)
    fused = np.empty((len(y), 3), dtype=np.float32)
    yf = y.astype(np.float32).astype(np.float64)
    for i in range(3):
        acc = np.full(len(y), reference.offset[i], dtype=np.float32)
        for j in range(4):  # exact product and sum in float64, one rounding to float32: an FMA
            acc = (acc.astype(np.float64) + np.float64(reference.gain[i, j]) * yf[:, j]).astype(np.float32)
        fused[:, i] = acc
    assert (fused.view(np.uint32) != reference.evaluate(y).view(np.uint32)).any()


def test_calibration_rows_are_checked(tmp_path):
    require("gcc")
    plan = random_plan(4, 3, 2, ranges="int16")
    emit(plan, lang="c", name="probe", out_dir=tmp_path / "out")
    rng = np.random.default_rng(2)
    rows = rng.uniform(-40000, 40000, size=(300, 3))  # beyond the box and the type: clamped, limited
    header = "y0,y1,y2\n"
    (tmp_path / "cal.csv").write_text(header + "\n".join(",".join(f"{v:.3f}" for v in r) for r in rows) + "\n")
    report = verify(tmp_path / "out", vectors=1000, data=tmp_path / "cal.csv")
    calibration = [r for r in report.results if r.vector_set == "calibration"]
    assert len(calibration) == 1 and calibration[0].count == 300  # verify raised had any mismatched


def test_verify_runs_micropython_plain_and_viper(tmp_path):
    require("gcc")
    require("micropython")
    require("mpy-cross")
    plan = random_plan(4, 3, 2, ranges="int16")
    manifest = emit(plan, lang="all", name="probe", out_dir=tmp_path)
    assert json.loads((tmp_path / "probe.manifest.json").read_text())["files"] == manifest["files"]
    report = verify(tmp_path, vectors=10**4)
    artefacts = {r.artefact for r in report.results}
    # Every entry point each file defines.
    assert {"C probe_estimate() (int, table)", "C probe_selftest()", "MicroPython probe.py estimate()",
            "MicroPython probe.py estimate_into()", "MicroPython probe.py estimate_into_viper()",
            "MicroPython probe.py self_test()"} == artefacts
    mp_random = [r for r in report.results if r.artefact.startswith("MicroPython") and r.vector_set == "random"]
    assert len(mp_random) == 3 and all(r.count == 10**4 and r.mismatches == 0 for r in mp_random)


def test_report_as_plain_data_keeps_every_count():
    from affix.verify.check import Report, Result

    report = Report("probe", [Result("C probe.c", "corners", 8, 0), Result("C probe.c", "random", 100, 2,
                                                                          [([1], [2], [3])])], ["note: x"])
    data = report.to_dict()
    assert (data["passed"], data["mismatches"], data["evaluations"]) == (False, 2, 108)
    assert [r["vectors"] for r in data["results"]] == [8, 100]
    assert data["results"][1]["examples"] == [[[1], [2], [3]]]
    json.dumps(data)  # plain data only
    # An entry point that fails without a mismatch fails the report all the same.
    crashed = Report("probe", [Result("MicroPython probe.py estimate()", "corners", 8, 0, error="raised")])
    assert not crashed.passed and crashed.to_dict()["passed"] is False
    assert crashed.failures() == ["MicroPython probe.py estimate(): raised"]
