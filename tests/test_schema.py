"""Every file affix reads is checked at one boundary: affix.schema.

Real model, plan and manifest files (written by the stages themselves) are
mutated field by field, nested fields and list items included: a wrong type,
NaN and infinity, a huge integer, a fraction where an integer belongs, a
negative value, a list one item too long or too short, null, a missing key,
an unknown key.  Each mutated file must either be refused with one
FileFormatError line that names the file and the field, or load into an
object that passes its schema again and that the next stage takes without
a traceback (an affix error of its own, such as an unmet budget, is fine).
JSON itself is RFC 8259 as Python's json module reads it.
"""
from __future__ import annotations

import copy
import json

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import affix
from affix import schema
from affix.arithmetic import IntegerEstimator
from affix.emit.manifest import MANIFEST_SCHEMA, load_manifest
from affix.emit.writer import emit
from affix.errors import AffixError, FileFormatError
from affix.float32_arithmetic import Float32Estimator
from affix.model import MODEL_SCHEMA, Model
from affix.plan import PLAN_SCHEMA, Plan
from affix.quantize import plan_fixed_point
from affix.verify.vectors import vector_sets
from conftest import run_affix

# --- the specs ------------------------------------------------------------------------------------------


def _parse(spec, value, sizes=None):
    return spec.parse(value, schema.At("f", dict(sizes or {})))


@pytest.mark.parametrize("spec, value, fragment", [
    (schema.Integer(), True, "expected an integer, got true/false"),
    (schema.Integer(), 2.0, "expected an integer, got 2.0"),
    (schema.Integer(0, 9), -1, "must be >= 0"),
    (schema.Integer(0, 9), 10, "must be <= 9"),
    (schema.Number(), "1", "expected a number, got a string"),
    (schema.Number(), float("nan"), "expected a finite number, got nan"),
    (schema.Number(), float("inf"), "expected a finite number, got inf"),
    (schema.Number(), 10**400, "beyond the range of a double"),
    (schema.Number(positive=True), 0, "must be > 0"),
    (schema.Number(min=0.0), -0.5, "must be >= 0"),
    (schema.Choice((8, 16, 32)), 16.0, "expected one of 8, 16, 32"),  # 16.0 == 16 in Python
    (schema.Choice((8, 16, 32)), True, "expected one of"),
    (schema.Text(), "a\nb", "control character"),
    (schema.Text(), "a\u2028b", "control character"),  # a line break to many readers
    (schema.Text(max_length=3), "abcd", "0 to 3 characters"),
    (schema.SHA256, "0" * 63, "SHA-256"),
    (schema.VERSION, "1.0 */", "version number"),
    (schema.List(schema.Integer(), "inputs"), [1], "expected 2 items (one per entry of 'inputs')"),
    (schema.List(schema.Integer(), unique=True), [1, 2, 1], "repeats 1"),
    (schema.List(schema.Integer()), {"a": 1}, "expected a list, got an object"),
    (schema.Covariance("inputs"), [[1.0, 0.5], [0.4, 1.0]], "breaks symmetry"),
    (schema.Covariance("inputs"), [[1.0, 2.0], [2.0, 1.0]], "not positive semi-definite"),
    (schema.Covariance("inputs", sign="definite"), [[1.0, 1.0], [1.0, 1.0]], "not positive definite"),
    (schema.Record(schema.Field("ridge", schema.Number())), {"rigde": 1}, "did you mean 'ridge'"),
    (schema.Record(schema.Field("ridge", schema.Number())), {}, "is missing"),
])
def test_a_spec_refuses_naming_what_is_wrong(spec, value, fragment):
    with pytest.raises(schema.FieldError, match=None) as caught:
        _parse(spec, value, {"inputs": 2})
    assert fragment in caught.value.message, caught.value.message


def test_specs_return_plain_values():
    assert _parse(schema.Number(), 3) == 3.0 and isinstance(_parse(schema.Number(), 3), float)
    assert _parse(schema.Choice(("nearest", "floor"), aliases={"half-up": "nearest"}), "half-up") == "nearest"
    assert _parse(schema.Array(("outputs", "inputs"), schema.Integer()), [[1, 2]], {"outputs": 1, "inputs": 2}) == ((1, 2),)
    record = schema.Record(schema.Field("a", schema.Integer()), schema.Field("b", schema.Integer(), default=schema.OMITTED),
                           schema.Field("c", schema.OrNone(schema.Integer()), default=None))
    assert _parse(record, {"a": 1}) == {"a": 1, "c": None}  # an omitted key stays out, a defaulted one comes in
    # A covariance computed in double precision, rounding included, passes.
    rows = np.random.default_rng(0).normal(size=(500, 3)) @ [[1, 0, 0], [0.999, 0.01, 0], [0, 0, 1e-6]]
    _parse(schema.Covariance("inputs"), np.cov(rows, rowvar=False).tolist(), {"inputs": 3})


def test_field_paths_name_nested_items():
    spec = schema.Record(schema.Field("budget", schema.Record(schema.Field("limits", schema.List(schema.Number())))))
    with pytest.raises(schema.FieldError) as caught:
        _parse(spec, {"budget": {"limits": [1.0, "x"]}})
    assert caught.value.field == "f.budget.limits[1]"


# --- real files, mutated ------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def real_files(tmp_path_factory):
    """A fitted model (statistics, cross-validation), the plan quantized from it against a
    budget and calibration rows, and the manifests of an integer and a float32 emit."""
    folder = tmp_path_factory.mktemp("files")
    rng = np.random.default_rng(11)
    y = rng.normal(2000, 300, size=(400, 3))
    x = y @ np.array([[0.01, -0.02, 0.005], [0.003, 0.004, -0.01]]).T + rng.normal(0, 0.05, size=(400, 2))
    model = affix.fit((y, x), inputs=["b1", "b2", "temp"], outputs=["Fx", "Fz"], folds=4)
    plan = plan_fixed_point(model, (0, 4095), budget={"Fx": 0.1, "Fz": 0.1}, calibration=[y], box_points=2000)
    paths = {"model": folder / "model.json", "plan": folder / "plan.json"}
    model.save(paths["model"])
    plan.save(paths["plan"])
    emit(plan, lang="all", name="probe", out_dir=folder / "int")
    emit(plan, lang="c", arith="float32", name="probe", out_dir=folder / "float32")
    emit(plan, lang="all", name="probe", out_dir=folder / "record", coefficients="record")
    paths["manifest"] = folder / "int" / "probe.manifest.json"
    paths["float32 manifest"] = folder / "float32" / "probe.manifest.json"
    paths["record manifest"] = folder / "record" / "probe.manifest.json"  # code that loads calibration records
    return {kind: json.loads(path.read_text()) for kind, path in paths.items()}


def _next_stage(kind, path):
    """Load ``path`` as ``kind`` and hand it to the stage that reads it; the loaded object (None if refused)."""
    if kind == "model":
        model = Model.load(path)
        model.validate()
        plan_fixed_point(model, (0, 4095), box_points=200)
        return model
    if kind == "plan":
        plan = Plan.load(path)
        plan.validate()
        emit(plan, lang="all", name="probe", out_dir=path.parent / "out")
        return plan
    manifest = load_manifest(path)
    sets = vector_sets(manifest["input_ranges"], manifest["input_ctype"], n_random=50)
    y = sets["random"].chunk(0)
    IntegerEstimator.from_mapping(manifest).evaluate(y)
    if manifest["arith"] == "float32":
        Float32Estimator.from_mapping(manifest).evaluate(y)
    return manifest


def _paths(value, prefix=()):
    """Every place in a JSON value: keys of objects, the first and last item of lists."""
    yield prefix
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, prefix + (key,))
    elif isinstance(value, list) and value:
        for k in sorted({0, len(value) - 1}):
            yield from _paths(value[k], prefix + (k,))


def _get(data, path):
    for step in path:
        data = data[step]
    return data


def _set(data, path, value):
    _get(data, path[:-1])[path[-1]] = value


def _mutations(value):
    """name -> mutated value (or DELETE) for one place holding ``value``."""
    out = {"text": "text", "object": {}, "null": None, "true": True, "nan": float("nan"),
           "infinity": float("-inf"), "huge integer": 10**400, "delete": DELETE}
    if isinstance(value, bool) or value is None:
        return out
    if isinstance(value, (int, float)):
        out["negative"] = -value if value else -1
        out["fraction"] = value + 0.5
        out["beyond int64"] = 2**63 + (value if isinstance(value, int) else 0)
    if isinstance(value, list):
        out["one more item"] = value + value[-1:] if value else [0]
        out["one item fewer"] = value[:-1]
    if isinstance(value, dict):
        out["unknown key"] = {**value, "unknown_key": 1}
    return out


DELETE = object()
KINDS = ("model", "plan", "manifest", "float32 manifest", "record manifest")
SCHEMAS = {"model": MODEL_SCHEMA, "plan": PLAN_SCHEMA, "manifest": MANIFEST_SCHEMA, "float32 manifest": MANIFEST_SCHEMA,
           "record manifest": MANIFEST_SCHEMA}
COMMAND = {"model": "quantize", "plan": "emit", "manifest": "verify", "float32 manifest": "verify",
           "record manifest": "verify"}


def _marked(kinds):
    """Each kind as a bad-input case of the command that reads it."""
    return [pytest.param(kind, marks=pytest.mark.bad_input(COMMAND[kind])) for kind in kinds]


def _check_mutated(kind, data, path, tmp_path):
    """The one acceptable outcome pair: refused naming the file and the field, or loaded and consistent."""
    file = tmp_path / f"{kind.replace(' ', '_')}.json"
    file.write_text(json.dumps(data))  # Python's json writes NaN and Infinity as those words
    try:
        _next_stage(kind.split()[-1], file)
    except FileFormatError as refused:
        line = refused.message
        assert "\n" not in line and line.startswith(f"{file}: "), line
        if path[1:] or path[0] != "format":
            # The field: the one changed, or one whose shape or rule ties it to that one.
            assert "field '" in line and str(path[0]) in line, (path, line)
        return "refused"
    except AffixError:
        return "loaded, refused by the next stage"
    return "loaded"


@pytest.mark.parametrize("kind", _marked(KINDS))
def test_every_field_mutated_is_refused_naming_it_or_loads_consistently(kind, real_files, tmp_path):
    original = real_files[kind]
    outcomes = {}
    for path in _paths(original):
        if not path:
            continue
        for mutation, value in _mutations(_get(original, path)).items():
            data = copy.deepcopy(original)
            if value is DELETE:
                del _get(data, path[:-1])[path[-1]]
            else:
                _set(data, path, value)
            outcome = _check_mutated(kind, data, path, tmp_path)
            outcomes.setdefault(outcome, []).append((path, mutation))
    # The test is about something: most mutations are refused, and some
    # (an optional key removed, a value still in range) load.
    assert len(outcomes.get("refused", [])) > 200
    assert outcomes.get("loaded")


@pytest.mark.parametrize("kind", KINDS)
def test_the_real_files_load_and_round_trip_exactly(kind, real_files, tmp_path):
    data = real_files[kind]
    file = tmp_path / "file.json"
    file.write_text(json.dumps(data))
    loaded = _next_stage(kind.split()[-1], file)
    if kind in ("model", "plan"):
        assert json.loads(json.dumps(loaded.to_dict())) == data  # the file it would write again
        assert set(SCHEMAS[kind].field_names) == set(data)  # no field declared but never written
    else:
        assert set(SCHEMAS[kind].field_names) - set(data) == (set() if kind.startswith("float32")
                                                               else {"float_gain", "float_offset"})


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-(2**70), 2**70) | st.floats(allow_nan=True) | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=8,
)


@pytest.mark.parametrize("kind", _marked(["model", "plan", "manifest"]))
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(choice=st.integers(0, 10**6), value=json_values)
def test_any_json_value_anywhere_is_refused_naming_it_or_loads(kind, real_files, tmp_path, choice, value):
    original = real_files[kind]
    places = [p for p in _paths(original) if p]
    path = places[choice % len(places)]
    data = copy.deepcopy(original)
    _set(data, path, value)
    _check_mutated(kind, data, path, tmp_path)


# --- what the issue found, through the real CLI ------------------------------------------------------------


def _model_edit(data, key, value):
    data[key] = value


MODEL_EDITS = {
    "a negative cv_rms": (lambda d: d["cv_rms"].__setitem__(0, -0.5), "field 'cv_rms[0]': must be >= 0"),
    "a negative ridge": (lambda d: _model_edit(d, "ridge", -1e-3), "field 'ridge': must be >= 0"),
    "a negative sample count": (lambda d: _model_edit(d, "n_samples", -5), "field 'n_samples': must be >= 0"),
    "a huge sample count": (lambda d: _model_edit(d, "n_samples", 10**30), "field 'n_samples': must be <="),
    "a gain row too short": (lambda d: d["gain"][0].pop(), "field 'gain[0]': expected 3 items (one per entry of 'inputs')"),
    "a covariance that is no covariance": (
        lambda d: d["input_covariance"][0].__setitem__(0, -d["input_covariance"][0][0]),
        "field 'input_covariance': is not positive semi-definite"),
    "a string for a number": (lambda d: d["offset"].__setitem__(1, "0.5"), "field 'offset[1]': expected a number"),
    "NaN": (lambda d: d["gain"][1].__setitem__(2, float("nan")), "field 'gain[1][2]': expected a finite number"),
    "an edited rms": (lambda d: d["rms"].__setitem__(0, 1.0), "field 'rms': disagrees"),
    "a misspelt key": (lambda d: d.__setitem__("cv_rsm", d.pop("cv_rms")), "field 'cv_rsm': is not a field of this file (did you mean 'cv_rms'?)"),
}


PLAN_EDITS = {
    "a fractional input range": (lambda d: d["input_ranges"][0].__setitem__(1, 4095.5),
                                 "field 'input_ranges[0][1]': expected an integer"),
    "an inverted input range": (lambda d: d["input_ranges"].__setitem__(1, [10, 5]), "field 'input_ranges[1]': is inverted"),
    "a box no one input type holds": (lambda d: d["input_ranges"].__setitem__(0, [-1, 2**32 - 1]),
                                      "field 'input_ranges[0]': reaches 4294967295, beyond the"),
    "an unknown C type": (lambda d: d.__setitem__("output_ctype", "int24_t"), "field 'output_ctype': expected one of"),
    "a coefficient beyond its width": (lambda d: d["coefficients"][0].__setitem__(0, 2**40),
                                       "field 'coefficients[0][0]': must be <="),
    "an offset that overflows the accumulator": (lambda d: d["offsets"].__setitem__(0, 2**62),
                                                 "field 'acc_bits': output 'Fx' reaches"),
    "a huge shift": (lambda d: d["shifts"].__setitem__(0, 10**9), "field 'shifts[0]': must be <= 255"),
    "a zero lsb": (lambda d: d["output_lsb"].__setitem__(0, 0.0), "field 'output_lsb[0]': must be > 0"),
    "a comment closer in the version": (lambda d: d.__setitem__("tool_version", "1 */ x"), "field 'tool_version'"),
    "an edited accumulator bound": (lambda d: d["accumulator_bound"].__setitem__(0, 1), "field 'accumulator_bound'"),
}


MANIFEST_EDITS = {
    "a file outside the folder": (lambda d: d["files"].__setitem__("c", ["../probe.c", "probe.h"]), "field 'files.c'"),
    "a name that injects C": (lambda d: d.__setitem__("name", "x);system(0"), "field 'name'"),
    "an unhashed file": (lambda d: d["file_sha256"].pop("probe.h"), "field 'file_sha256'"),
    "a manifest from before file hashes": (lambda d: d.pop("file_sha256"), "field 'file_sha256': is missing"),
    "a rounding rule that contradicts the rounding": (lambda d: d.__setitem__("rounding_rule", "round toward zero"),
                                                      "field 'rounding_rule'"),
    "an input type too narrow for the box": (lambda d: d.__setitem__("input_ctype", "int8_t"), "field 'input_ctype'"),
}


# kind -> (the file's name, the edits, the command that reads it with its other arguments, what it would write)
CLI_EDITS = {
    "model": ("model.json", MODEL_EDITS, ["quantize", "{file}", "--range", "0:4095", "--out", "{out}"], "plan.json"),
    "plan": ("plan.json", PLAN_EDITS, ["emit", "{file}", "--lang", "all", "--name", "probe", "--out", "{out}"], "fw"),
    "manifest": ("probe.manifest.json", MANIFEST_EDITS, ["verify", "{file}", "--vectors", "100"], None),
}


@pytest.mark.parametrize("kind, case", [
    pytest.param(kind, case, marks=pytest.mark.bad_input(COMMAND[kind]), id=f"{kind}: {case}")
    for kind, (_, edits, _, _) in CLI_EDITS.items() for case in edits
])
def test_a_hand_edited_file_is_refused_in_one_line(kind, case, real_files, tmp_path):
    name, edits, command, output = CLI_EDITS[kind]
    edit, fragment = edits[case]
    data = copy.deepcopy(real_files[kind])
    edit(data)
    file, out = tmp_path / name, tmp_path / (output or "unused")
    file.write_text(json.dumps(data))
    done = run_affix(*(arg.format(file=file, out=out) for arg in command))
    assert done.returncode == 2, done.stdout + done.stderr
    assert done.stderr.startswith(f"affix: error: {file}: {fragment}"), done.stderr
    assert done.stderr.count("\n") == 1, done.stderr
    assert not out.exists()


@pytest.mark.bad_input("quantize")
def test_a_key_given_twice_is_refused(tmp_path, real_files):
    text = json.dumps(real_files["model"])
    (tmp_path / "model.json").write_text(text[:-1] + ', "ridge": 0.5}')
    with pytest.raises(FileFormatError, match="key 'ridge' appears twice"):
        Model.load(tmp_path / "model.json")
