"""Emit a plan: check the names, render each language, write the files and the manifest.

The manifest (``NAME.manifest.json``) is the machine-readable description of
what was emitted: verification and CI rebuild the integer reference from it
alone, never from the plan.
"""
from __future__ import annotations

import json
from pathlib import Path

from affix import files
from affix.arithmetic import ROUNDING_RULES
from affix.emit import ARITHS, LANGUAGES, MANIFEST_FORMAT, STYLES
from affix.emit.manifest import estimator_name, generated_files, manifest_name, manifests_in, sha256_of
from affix.emit.names import check_names, check_units, names_could_clash
from affix.errors import UsageError
from affix.interface import COEFFICIENT_SOURCES, describe


def emit(plan, *, lang: str, name: str, out_dir, arith: str = "int", style: str = "table", units=None,
         coefficients: str = "compiled") -> dict:
    """Write the emitted files for ``lang`` ("c", "micropython" or "all") and
    the manifest into ``out_dir``; return the manifest.

    ``coefficients`` is how the firmware gets them: "compiled" into the code,
    or "record": the code loads each unit's calibration record
    (:mod:`affix.record`) at run time, and ``plan``'s own integers serve
    only as the self-test's record.

    ``units`` maps input and output names to unit texts for the comments and
    the interface (:func:`affix.interface.describe`), whose fingerprint every
    file carries and the manifest holds in full.

    Everything is rendered and checked before the first file is written, and
    the files land together (:class:`affix.files.FileSet`): an error leaves
    ``out_dir`` as it was, and success replaces what an earlier emit of this
    estimator wrote there, leaving any other file alone, other estimators'
    included (their names may not clash with ``name``: see names_could_clash).
    """
    languages = LANGUAGES if lang == "all" else (lang,)
    _check_choice(lang, LANGUAGES + ("all",), "lang")
    _check_choice(arith, ARITHS, "arith")
    _check_choice(style, STYLES, "style")
    if arith == "float32" and "micropython" in languages:
        raise UsageError("float32 arithmetic is a C target only (MicroPython output is integer)", "arith")
    _check_choice(coefficients, COEFFICIENT_SOURCES, "coefficients")
    if coefficients == "record" and arith != "int":
        raise UsageError("a calibration record holds integer coefficients: use the integer arithmetic", "arith")
    if coefficients == "record" and style != "table":
        raise UsageError("code that loads a record reads its coefficients from a table: use the table style",
                         "style")
    check_names(name, plan.inputs, plan.outputs)
    _check_neighbours(name, Path(out_dir))
    plan.validate()
    units = check_units(units or {}, plan.inputs + plan.outputs)
    interface = describe(plan, name, languages=languages, arith=arith, units=units, coefficients=coefficients)

    rendered: dict[str, dict[str, str]] = {}
    notes: list[str] = []
    if "c" in languages:
        from affix.emit.c import notes as c_notes, render_c

        rendered["c"] = render_c(plan, name, arith=arith, style=style, interface=interface)
        notes += c_notes(plan, arith=arith, style=style)
    if "micropython" in languages:
        from affix.emit.micropython import notes as micropython_notes, render_micropython

        rendered["micropython"] = render_micropython(plan, name, interface)
        notes += micropython_notes(plan, records=coefficients == "record")

    manifest = manifest_for(plan, name, arith, style, rendered, notes)
    manifest["function"] = interface.c["function"] if interface.c else manifest["function"]
    manifest["interface"] = interface.to_dict()
    with files.FileSet(out_dir, parameter="out_dir", earlier=lambda folder: emitted_before(folder, name)) as staged:
        for sources in rendered.values():
            for filename, text in sources.items():
                staged.write_text(filename, text)
        staged.write_json(manifest_name(name), manifest)
    return manifest


def emitted_before(out_dir: Path, name: str | None = None) -> set[str]:
    """What earlier emits of ``name`` (None: of any estimator) left in ``out_dir``:
    the manifest and the files it lists.

    An emit replaces these; a manifest too garbled to list its files still
    goes, and its files are left alone.  Only names an emit of that
    estimator can have written count, so an edited manifest cannot make an
    emit remove any other file of the folder.
    """
    names = set()
    for path in manifests_in(out_dir):
        stem = estimator_name(path)
        if name is not None and stem != name:
            continue
        names.add(path.name)
        try:
            listed = json.loads(path.read_text()).get("files", {}).values()
            names.update(n for group in listed for n in group if isinstance(n, str) and n in generated_files(stem))
        except (OSError, UnicodeDecodeError, ValueError, AttributeError, TypeError):
            continue
    return names


def manifest_for(plan, name: str, arith: str, style: str, rendered: dict, notes: list[str]) -> dict:
    """The manifest of the ``rendered`` files, {language: {filename: text}}."""
    manifest = {
        "format": MANIFEST_FORMAT,
        "name": name,
        "function": f"{name}_estimate",
        "files": {lang: sorted(sources) for lang, sources in rendered.items()},
        "file_sha256": {f: sha256_of(text.encode("utf-8"))
                        for sources in rendered.values() for f, text in sorted(sources.items())},
        "arith": arith,
        "style": style,
        "input_ctype": plan.input_ctype,
        "target": plan.target,
        # The plan's integer type even for float32 code (which returns float):
        # the integer reference is always rebuildable from the manifest.
        "output_ctype": plan.output_ctype,
        "inputs": list(plan.inputs),
        "input_ranges": [list(r) for r in plan.input_ranges],
        "input_lsb": None if plan.input_lsb is None else list(plan.input_lsb),
        "outputs": list(plan.outputs),
        "output_lsb": list(plan.output_lsb),
        "coefficients": [list(row) for row in plan.coefficients],
        "offsets": list(plan.offsets),
        "shifts": list(plan.shifts),
        "acc_bits": plan.acc_bits,
        "coef_bits": plan.coef_bits,
        "rounding": plan.rounding,
        "rounding_rule": ROUNDING_RULES[plan.rounding],
        "plan_sha256": plan.sha256,
        "model_sha256": plan.model_sha256,
        "tool_version": plan.tool_version,
        "notes": notes,
    }
    if arith == "float32":
        manifest["float_gain"] = [list(row) for row in plan.gain]
        manifest["float_offset"] = list(plan.offset)
    return manifest


def _check_neighbours(name: str, out_dir: Path) -> None:
    """Refuse a name whose C identifiers could clash with another estimator's in the same folder."""
    for path in manifests_in(out_dir):
        other = estimator_name(path)
        if names_could_clash(name, other):
            raise UsageError(
                f"'{name}' and the estimator '{other}' in {out_dir} could generate the same C identifiers "
                "(one name and '_' start the other, ignoring case); choose another name or folder",
                "name",
            )


def _check_choice(value: str, choices, option: str) -> None:
    if value not in choices:
        raise UsageError(f"'{value}' is not one of {', '.join(choices)}", option)
