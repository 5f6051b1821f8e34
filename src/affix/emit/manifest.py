"""The manifest, ``NAME.manifest.json``: what an emit wrote, and the SHA-256 of every file.

Verification rebuilds the integer reference from the manifest alone, never
from the plan, and refuses a folder whose files are not the ones the
manifest hashed.  :data:`MANIFEST_SCHEMA` is the one place a manifest is
checked when read; ``affix.emit.writer`` builds it.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

from affix import schema
from affix.arithmetic import INPUT_CTYPES, ROUNDING_RULES, ctype_holds
from affix.emit import ARITHS, LANGUAGES, MANIFEST_FORMAT, MANIFEST_SUFFIX, STYLES
from affix.emit.names import check_names
from affix.errors import UsageError
from affix.float32_arithmetic import FLOAT32_MAX
from affix.interface import INTERFACE_RECORD, agrees_with_manifest
from affix.plan import INTEGER_CONTRACT, prove_integer_contract

# The files each language writes, by estimator name.
_LANGUAGE_FILES = {"c": ("{name}.c", "{name}.h"), "micropython": ("{name}.py",)}


def language_files(name: str, lang: str) -> list[str]:
    """The file names ``lang`` writes for estimator ``name``, sorted."""
    return sorted(pattern.format(name=name) for pattern in _LANGUAGE_FILES[lang])


def generated_files(name: str) -> list[str]:
    """Every file name an emit of ``name`` can write, in any language."""
    return sorted(f for lang in LANGUAGES for f in language_files(name, lang))


def manifest_name(name: str) -> str:
    return f"{name}{MANIFEST_SUFFIX}"


def estimator_name(path) -> str:
    """The estimator a manifest file is named after (``probe.manifest.json`` -> ``probe``)."""
    return Path(path).name[: -len(MANIFEST_SUFFIX)]


def manifests_in(folder) -> list[Path]:
    return sorted(Path(folder).glob(f"*{MANIFEST_SUFFIX}"))


def sha256_of(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def load_manifest(path) -> dict:
    """The checked content of a manifest file, as plain values (lists read as tuples)."""
    return MANIFEST_SCHEMA.read(path)


# --- the schema ----------------------------------------------------------------


def _names_are_emittable(values) -> None:
    """The names reach templates again (the verification build), so they pass the emitter's own check."""
    try:
        check_names(values["name"], values["inputs"], values["outputs"])
    except UsageError as exc:  # its parameter: "name", or "input name 'x'" / "output name 'x'"
        if exc.parameter == "name":
            schema.fail("name", exc.message.removeprefix("name: "))
        schema.fail("inputs" if exc.parameter.startswith("input") else "outputs", exc.message)
    records = values.get("interface", {}).get("coefficients") == "record"
    word = "_estimate_record" if records else "_estimate"
    if values["function"] != f"{values['name']}{word}":
        source = "loaded from records" if records else "compiled"
        schema.fail("function", f"must be {values['name']}{word}: the estimator's name (field 'name') and {word}, "
                    f"for coefficients {source} (field 'interface')")


def _files_agree(values) -> None:
    """Only the files an emit writes, every one of them hashed: no path reaches outside the folder."""
    name, listed = values["name"], values["files"]
    if not listed:
        schema.fail("files", "lists no language")
    for lang, names in listed.items():
        if list(names) != language_files(name, lang):
            schema.fail(f"files.{lang}", f"must be {language_files(name, lang)} for the estimator '{name}' (field 'name')")
    expected = sorted(f for names in listed.values() for f in names)
    if sorted(values["file_sha256"]) != expected:
        schema.fail("file_sha256", f"must hash exactly the listed files, {expected}")


def _types_agree(values) -> None:
    if not ctype_holds(values["input_ctype"], values["input_ranges"]):
        schema.fail("input_ctype", f"{values['input_ctype']} does not hold every one of the input_ranges")
    if values["rounding_rule"] != ROUNDING_RULES[values["rounding"]]:
        schema.fail("rounding_rule", f"must read '{ROUNDING_RULES[values['rounding']]}' for rounding "
                    f"'{values['rounding']}'")
    floating = values["arith"] == "float32"
    for key in ("float_gain", "float_offset"):
        if (key in values) != floating:
            schema.fail(key, "must be given exactly for float32 code (arith)")


_FLOAT32 = schema.Number(min=-FLOAT32_MAX, max=FLOAT32_MAX)

MANIFEST_SCHEMA = schema.Schema(
    "manifest",
    MANIFEST_FORMAT,
    schema.Field("tool_version", schema.VERSION),
    *INTEGER_CONTRACT,
    schema.Field("name", schema.Text(min_length=1, max_length=64)),
    schema.Field("function", schema.Text(max_length=80)),
    schema.Field("files", schema.Mapping(schema.Choice(LANGUAGES), schema.List(schema.Text(), max_length=4))),
    schema.Field("file_sha256", schema.Mapping(schema.Text(max_length=80), schema.SHA256)),
    schema.Field("arith", schema.Choice(ARITHS)),
    schema.Field("style", schema.Choice(STYLES)),
    schema.Field("input_ctype", schema.Choice(INPUT_CTYPES)),
    schema.Field("rounding_rule", schema.Text()),
    schema.Field("plan_sha256", schema.SHA256),
    schema.Field("model_sha256", schema.SHA256),
    schema.Field("notes", schema.List(schema.Text(max_length=1000), max_length=100)),
    schema.Field("float_gain", schema.Array(("outputs", "inputs"), _FLOAT32), default=schema.OMITTED),
    schema.Field("float_offset", schema.Array(("outputs",), _FLOAT32), default=schema.OMITTED),
    # The firmware interface the files carry the fingerprint of (affix.interface); manifests of an
    # affix before it lack it.
    schema.Field("interface", INTERFACE_RECORD, default=schema.OMITTED),
    rules=(_names_are_emittable, prove_integer_contract, _files_agree, _types_agree, agrees_with_manifest),
)
