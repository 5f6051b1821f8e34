"""The build report: affix report BUILD_DIR writes one self-contained, standards-conforming page whose
every number is the one in the file it came from."""
from __future__ import annotations

import csv
import io
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import html5lib
import numpy as np
import pandas as pd
import pytest

from affix.report import write_report
from affix.workflow import demo_scenario
from build_folder import DATA_FILE, NAME, make_build_folder
from conftest import require, run_affix

HERE = Path(__file__).parent


@pytest.fixture(scope="module")
def build(tmp_path_factory) -> Path:
    """A complete build folder with every optional part: target figures, a diff and a fleet."""
    # Target figures as affix.targets.target_figures gives them: numbers, texts, and None where not measured.
    folder = make_build_folder(tmp_path_factory.mktemp("report"), target_figures={
        "target": "cortex-m4", "compiler": "arm-none-eabi-gcc", "flags": "-O2 -mcpu=cortex-m4",
        "instructions_per_evaluation": 404, "instructions_max": 404, "flash_bytes": 1312, "stack_bytes": 96,
        "stack_bytes_measured": None})
    write_diff(folder)
    write_fleet(folder)
    write_report(folder)
    return folder


@pytest.fixture(scope="module")
def page(build) -> str:
    return (build / "report.html").read_text(encoding="utf-8")


def write_diff(folder: Path) -> None:
    """diff.json per the build-folder contract: the gain changes of a refit on the first half of the rows."""
    model = json.loads((folder / "model.json").read_text())
    rows = pd.read_csv(folder.parent / DATA_FILE).iloc[: demo_scenario.ROWS // 2]
    y = np.column_stack([np.ones(len(rows)), rows[demo_scenario.INPUTS].to_numpy()])
    previous = np.linalg.lstsq(y, rows[demo_scenario.OUTPUTS].to_numpy(), rcond=None)[0].T
    gain, offset = np.array(model["gain"]), np.array(model["offset"])
    diff = {
        "interface_changed": False,
        "interface_changes": [],
        "input_order": demo_scenario.INPUTS,
        "outputs": {name: {"gain_change": (gain[i] - previous[i, 1:]).tolist(),
                           "gain_relative_change": ((gain[i] - previous[i, 1:]) / np.abs(previous[i, 1:])).tolist(),
                           "offset_change": float(offset[i] - previous[i, 0])}
                    for i, name in enumerate(demo_scenario.OUTPUTS)},
    }
    (folder / "diff.json").write_text(json.dumps(diff, indent=2) + "\n")


def write_fleet(folder: Path, units: int = 40) -> None:
    """fleet.csv per the contract: 40 units, margins around the budget, three of them failing on Fz."""
    rng = np.random.default_rng(11)
    outputs = demo_scenario.OUTPUTS
    header = ["unit", "rows", "passed"] + [f"{o}.{f}" for o in outputs for f in ("rms", "cv_rms", "worst_case",
                                                                                  "margin", "passed")]
    lines = [header]
    for k in range(units):
        cells, unit_ok = [], True
        for o in outputs:
            margin = rng.normal(0.03, 0.005) - (0.05 if o == "Fz" and k in (3, 17, 29) else 0.0)
            ok = margin >= 0
            unit_ok &= ok
            cells += [f"{rng.uniform(0.05, 0.1):.6g}", f"{rng.uniform(0.05, 0.1):.6g}", f"{rng.uniform(0.01, 0.03):.6g}",
                      f"{margin:.6g}", "true" if ok else "false"]
        lines.append([f"unit-{k:03d}", str(2000 + k), "true" if unit_ok else "false"] + cells)
    with open(folder / "fleet.csv", "w", newline="") as handle:
        csv.writer(handle).writerows(lines)


def parse(text: str):
    """The page parsed by html5lib in strict mode: any parse error of the HTML standard raises."""
    return html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)


# --- the command and the page as a file -------------------------------------------------------------


def test_report_command_writes_the_page(build, tmp_path):
    copy = shutil.copytree(build.parent, tmp_path / "project")
    (copy / "build" / "report.html").unlink()
    result = run_affix("report", copy / "build")
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == f"wrote {copy / 'build' / 'report.html'}"
    # A build folder holds no timestamps and no absolute paths: the same inputs give the same page.
    assert (copy / "build" / "report.html").read_bytes() == (build / "report.html").read_bytes()


def test_page_conforms_to_the_html_standard(page):
    document = parse(page)
    assert document.find(".//title").text == f"{NAME}: build report"
    assert page.startswith("<!DOCTYPE html>")


def test_page_loads_nothing(page):
    document = parse(page)
    assert not document.findall(".//script") and not document.findall(".//link") and not document.findall(".//iframe")
    images = document.findall(".//img")
    assert len(images) >= 8  # budget, deviation, residuals, coverage, gain, headroom, changes, fleet
    for image in images:
        assert image.get("src").startswith("data:image/svg+xml"), image.get("src")[:40]
        assert len(image.get("alt")) > 40  # a real description, not a placeholder
    for element in document.iter():
        for attribute in ("href", "src", "action", "poster"):
            value = element.get(attribute)
            assert value is None or value.startswith(("#", "data:")), value[:60]
    policy = document.find(".//meta[@http-equiv='Content-Security-Policy']").get("content")
    assert "default-src 'none'" in policy and "img-src data:" in policy
    style = "".join(s.text for s in document.findall(".//style"))
    assert "@import" not in style and "url(" not in style and "@font-face" not in style


def test_page_stays_small_and_carries_the_caution(page):
    from affix.emit.context import CAUTION

    assert len(page.encode()) < 3 * 2**20
    caution = [" ".join("".join(p.itertext()).split()) for p in parse(page).findall(".//section[@class='caution']/p")]
    assert caution == list(CAUTION)


# --- every number shown is the one in its file -----------------------------------------------------


def resolve(build: Path, source: str):
    """The value a data-source names: a JSON pointer (RFC 6901) into a file of the folder, a cell of
    fleet.csv, or a figure of the calibration data computed here independently with pandas."""
    file, _, where = source.partition("#")
    if file.startswith("data:"):
        return data_figure(build, file.removeprefix("data:"))
    if file == "fleet.csv":
        line, column = where.split("/", 1)
        rows = list(csv.DictReader((build / "fleet.csv").open(newline="")))
        return rows[int(line.removeprefix("L")) - 2][column]
    value = json.loads((build / file).read_text())
    for part in where.removeprefix("/").split("/"):
        part = part.replace("~1", "/").replace("~0", "~")
        value = value[int(part)] if isinstance(value, list) else value[part]
    return value


def data_figure(build: Path, path: str):
    """Figures of the calibration data, recomputed from the CSV with pandas."""
    data = pd.read_csv(build.parent / DATA_FILE)
    plan = json.loads((build / "plan.json").read_text())
    kind, *rest = path.split("/")
    if kind == "coverage":
        name, figure = rest
        column, j = data[name], plan["inputs"].index(name)
        lo, hi = plan["input_ranges"][j]
        return {"minimum": column.min(), "maximum": column.max(), "below": int((column < lo).sum()),
                "above": int((column > hi).sum()),
                "covered_percent": (min(column.max(), hi) - max(column.min(), lo)) / (hi - lo) * 100}[figure]
    if kind == "files":
        return len(data)
    if kind == "rows":
        return len(data)
    if kind == "sample" and rest == ["points"]:
        return min(len(data), 10_000)  # at most 10**4 points per residual panel
    inside = np.ones(len(data), dtype=bool)
    for name, (lo, hi) in zip(plan["inputs"], plan["input_ranges"]):
        inside &= data[name].between(lo, hi).to_numpy()
    if kind == "deviation" and rest == ["rows"]:
        return int(inside.sum())
    if kind == "deviation" and rest == ["outside_box"]:
        return int((~inside).sum())
    if kind == "deviation" and rest[0] == "rms":
        # The quantizer measured the same deviation on the same rows when it made the plan.
        return plan["measured"]["calibration"]["rms_deviation"][plan["outputs"].index(rest[1])]
    if kind in ("deviation", "random") and rest[0] == "over_bound":
        return 0  # the bound is a proof: no row may exceed it
    if kind == "fleet" and rest == ["units"]:
        return len(list(csv.DictReader((build / "fleet.csv").open(newline=""))))
    if kind == "fleet" and rest == ["failed_units"]:
        return sum(row["passed"] == "false" for row in csv.DictReader((build / "fleet.csv").open(newline="")))
    raise AssertionError(f"unknown data figure {path}")


def shown_value(text: str) -> float:
    return float(text.replace("\u2009", "").replace("–", "-").replace("−", "-"))


def test_every_number_equals_its_source(build, page):
    document = parse(page)
    marked = document.findall(".//*[@data-source]")
    assert len(marked) > 250
    files = set()
    for element in marked:
        source, exact, text = element.get("data-source"), element.get("data-value"), "".join(element.itertext())
        expected = resolve(build, source)
        files.add(source.partition("#")[0].split("/")[0])
        if isinstance(expected, bool) or expected in ("true", "false"):
            assert exact == str(expected).lower(), source
            continue
        expected = float(expected)
        assert float(exact) == pytest.approx(expected, rel=1e-12, abs=1e-300), source
        if text.strip()[:1].isdigit() or text.strip()[:1] in "-−":
            # Shown with four significant digits, or as the whole integer it is.
            assert shown_value(text) == pytest.approx(expected, rel=6e-4, abs=1e-300), (source, text)
    # Numbers come from every kind of file of the folder.
    assert {"plan.json", "model.json", f"{NAME}.manifest.json", "verification.json", "build.json", "diff.json",
            "fleet.csv", "data:coverage", "data:deviation"} <= files


def test_no_number_in_a_table_goes_unmarked(page):
    document = parse(page)
    for cell in document.findall(".//td"):
        text = "".join(cell.itertext()).strip()
        try:
            shown_value(text)
        except ValueError:
            continue
        assert cell.find(".//*[@data-source]") is not None, f"unmarked number {text!r}"


def unmarked_text(element) -> str:
    """The text of ``element`` outside the elements that name a source."""
    if element.get("data-source") is not None:
        return element.tail or ""
    inner = (element.text or "") + "".join(unmarked_text(child) for child in element)
    return inner + (element.tail or "")


def test_no_number_in_prose_goes_unmarked(page):
    document = parse(page)
    paragraphs = document.findall(".//p[@class='lead']") + document.findall(".//a[@class]")
    assert len(paragraphs) > 12
    for paragraph in paragraphs:
        text = unmarked_text(paragraph).replace(paragraph.tail or "", "").replace("10³", "")
        for name in sorted(demo_scenario.INPUTS + demo_scenario.OUTPUTS, key=len, reverse=True):
            text = text.replace(name, "")  # names may hold digits (bridge1); they are not figures
        assert not any(ch.isdigit() for ch in text), text


def test_fleet_and_changes_sections_show_their_files(page):
    """The units that fail (write_fleet made units 3, 17 and 29 fail on Fz) are listed, in file order."""
    document = parse(page)
    fleet = document.find(".//section[@id='fleet']")
    failing = [row.find("td").text for row in fleet.findall(".//tbody/tr")]
    assert failing == ["unit-003", "unit-017", "unit-029"]
    changes = "".join(document.find(".//section[@id='changes']").itertext())
    assert "Firmware interface: unchanged" in " ".join(changes.split())


# --- absent and broken parts ------------------------------------------------------------------------


def copy_build(build: Path, tmp_path: Path) -> Path:
    copy = shutil.copytree(build.parent, tmp_path / "project") / "build"
    for optional in ("diff.json", "fleet.csv", "report.html"):
        (copy / optional).unlink()
    return copy


def section_text(page: str, section: str) -> str:
    return " ".join("".join(parse(page).find(f".//section[@id='{section}']").itertext()).split())


def test_absent_optional_parts_are_a_sentence_each(build, tmp_path):
    copy = copy_build(build, tmp_path)
    (copy / "verification.json").unlink()
    (copy.parent / DATA_FILE).unlink()
    info = json.loads((copy / "build.json").read_text())
    info["target_figures"] = None
    (copy / "build.json").write_text(json.dumps(info))
    page = write_report(copy).read_text()
    parse(page)
    assert "no diff.json" in section_text(page, "changes")
    assert "no fleet.csv" in section_text(page, "fleet")
    assert "No verification report" in section_text(page, "verification")
    assert "No target figures" in section_text(page, "verification")
    assert f"{DATA_FILE}: no such file" in section_text(page, "coverage")
    assert "left out" in section_text(page, "residuals")


def test_a_folder_without_build_json_still_reports(build, tmp_path):
    copy = copy_build(build, tmp_path)
    (copy / "build.json").unlink()
    page = write_report(copy).read_text()
    assert "no build.json" in section_text(page, "made-of")
    assert "no calibration data file is recorded" in section_text(page, "coverage").lower()


def test_changed_data_file_is_named_and_left_out(build, tmp_path):
    copy = copy_build(build, tmp_path)
    data = copy.parent / DATA_FILE
    data.write_text(data.read_text().replace("\n", "\n", 1) + "")  # same content: still used
    assert "changed since the build" not in write_report(copy).read_text()
    lines = data.read_text().splitlines(keepends=True)
    data.write_text("".join(lines[:-1]))  # one row fewer: a different file
    page = write_report(copy).read_text()
    assert "changed since the build" in section_text(page, "coverage")
    assert "changed since the build" in section_text(page, "made-of")


@pytest.mark.bad_input("report")
@pytest.mark.parametrize("missing", ["model.json", "plan.json", f"{NAME}.manifest.json"])
def test_missing_required_file_is_one_error_line(build, tmp_path, missing):
    copy = copy_build(build, tmp_path)
    (copy / missing).unlink()
    result = run_affix("report", copy)
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and result.stderr.startswith("affix: error: ")
    assert not (copy / "report.html").exists()


@pytest.mark.bad_input("report")
@pytest.mark.parametrize("file, content, words", [
    ("fleet.csv", "unit,rows\nu1,10\n", "the header must be"),
    ("diff.json", '{"interface_changed": "no", "interface_changes": []}', "not a diff"),
    ("diff.json", '{"interface_changed": false, "interface_changes": [], "input_order": ["b1"]}', "input_order differs"),
    ("build.json", '{"format": "affix.build/1", "tool_version": "1", "name": "x", "project": "/abs/affix.toml", '
                   '"data": []}', "must be a relative path"),
    ("verification.json", '{"passed": true}', "not a verification report"),
    ("plan.json", "{", "not readable as JSON"),
])
def test_garbled_file_is_one_error_line(build, tmp_path, file, content, words):
    copy = copy_build(build, tmp_path)
    (copy / file).write_text(content)
    result = run_affix("report", copy)
    assert result.returncode == 2, result.stderr
    assert result.stderr.count("\n") == 1 and words in result.stderr and file in result.stderr


@pytest.mark.bad_input("report")
def test_plan_from_another_model_is_refused(build, tmp_path):
    copy = copy_build(build, tmp_path)
    model = json.loads((copy / "model.json").read_text())
    model["offset"][0] += 1.0
    (copy / "model.json").write_text(json.dumps(model))
    result = run_affix("report", copy)
    assert result.returncode == 2 and "was not made from model.json" in result.stderr


def test_missing_matplotlib_says_what_to_install(build, tmp_path):
    copy = copy_build(build, tmp_path)
    program = ("import sys; sys.modules['matplotlib'] = None\n"  # find_spec answers None: as if not installed
               "from affix.workflow.cli import main; sys.exit(main(['report', sys.argv[1]]))")
    result = subprocess.run([sys.executable, "-c", program, str(copy)], capture_output=True, text=True)
    assert result.returncode == 4
    assert result.stderr == "affix: error: the report needs matplotlib, which is not installed: " \
                            "pip install 'affix[report]'\n"


# --- plots and data pass ---------------------------------------------------------------------------


def test_plots_render_without_a_display(tmp_path):
    program = (
        "import matplotlib, affix.report.plots as plots\n"
        "image = plots.headroom(['a', 'b'], [20.0, 30.0], [11.0, 1.0], 32)\n"
        "print(matplotlib.get_backend(), image.width, image.uri[:24])\n"
    )
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY", "MPLBACKEND")}
    result = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True, env=env)
    assert result.returncode == 0, result.stderr
    backend, width, uri = result.stdout.split()
    assert backend.lower() == "agg" and int(width) > 300 and uri == "data:image/svg+xml;chars"


def test_trend_shows_a_missing_square_term(tmp_path):
    """For y uniform on [-1, 1] and x = y**2 + noise, the least-squares line is x = 1/3, so the
    residual's trend is y**2 - 1/3 with mean square Var(y**2) = 1/5 - 1/9 = 4/45 (moments of the
    uniform distribution): the trend along y must carry 4/45 / (4/45 + sigma**2) of the residual
    mean square, and nothing along an unrelated input."""
    import affix
    from affix.quantize import plan_fixed_point
    from affix.report.build_folder import DataFile
    from affix.report.content import trend
    from affix.report.scan import scan

    rng = np.random.default_rng(5)
    rows, sigma = 200_000, 0.1
    y = rng.uniform(-1, 1, size=(rows, 2))
    x = y[:, 0] ** 2 + rng.normal(scale=sigma, size=rows)
    path = tmp_path / "curved.csv"
    pd.DataFrame({"a": y[:, 0], "b": y[:, 1], "x": x}).to_csv(path, index=False)
    model = affix.fit(path, inputs=["a", "b"], outputs=["x"])
    plan = plan_fixed_point(model, (-1000, 1000), input_lsb=0.001)
    from build_folder import sha256

    found = scan([path], [DataFile("curved.csv", sha256(path))], model, plan)
    assert found.rows == rows and len(found.sample_inputs) == 10_000
    expected = (4 / 45) / (4 / 45 + sigma**2) * 100
    _, curve, along_a = trend(found.coverage[0], 0)
    _, _, along_b = trend(found.coverage[1], 0)
    assert along_a == pytest.approx(expected, abs=1.5)  # 24 groups smooth away a little of the curve
    assert along_b < 0.1
    assert curve[0] > 0.5 and curve[len(curve) // 2] < -0.2  # high at the ends, low in the middle


def test_a_wide_model_shows_the_residual_columns_of_its_likeliest_missing_terms():
    # 20 inputs: the matrix keeps the 8 along which some output's trend share is largest, in input order.
    from affix.report.content import RESIDUAL_COLUMNS, residual_columns

    rng = np.random.default_rng(3)
    shares = rng.uniform(0, 1, size=(3, 20))
    shares[1, [2, 17]] = [40.0, 25.0]  # output 1 bends along inputs 2 and 17
    trends = [[(np.empty(0), np.empty(0), float(share)) for share in row] for row in shares]
    chosen = residual_columns(trends)
    largest = shares.max(axis=0)
    assert RESIDUAL_COLUMNS == 8 and len(chosen) == 8 and chosen == sorted(chosen)
    assert {2, 17} <= set(chosen)
    assert largest[chosen].min() >= np.delete(largest, chosen).max()
    assert residual_columns([row[:5] for row in trends]) == [0, 1, 2, 3, 4]  # few inputs: all of them


def test_a_staged_build_reports_before_its_record(build, tmp_path):
    """How a build can call it: the folder staged elsewhere, build.json not written yet."""
    from affix.report import render_report

    copy = copy_build(build, tmp_path)
    record = json.loads((copy / "build.json").read_text())
    staging = tmp_path / "staging"
    shutil.copytree(copy, staging / "deeper")  # one level deeper than the build: relative paths would miss
    (staging / "deeper" / "build.json").unlink()
    text = render_report(staging / "deeper", record=record, location=copy)
    assert text == write_report(copy).read_text()
    # A first build's folder does not exist until it moves into place: 'build-new/..' must still resolve.
    assert render_report(staging / "deeper", record=record, location=copy.parent / "build-new") == text


def test_worker_process_pass_gives_the_same_page(build, tmp_path, monkeypatch):
    """Large data are read by a forked worker while the page's other plots are drawn: same page."""
    import importlib

    copy = copy_build(build, tmp_path)
    serial = write_report(copy).read_bytes()
    monkeypatch.setattr(importlib.import_module("affix.fit.passes"), "PARALLEL_MIN_BYTES", 0)
    monkeypatch.setattr(importlib.import_module("affix.fit.passes"), "usable_cpus", lambda: 2)
    assert write_report(copy).read_bytes() == serial


def test_sample_does_not_depend_on_chunking(build):
    from affix.report.build_folder import read_build_folder
    from affix.report import scan as scan_module

    folder = read_build_folder(build)
    record = folder.build.data[0]
    path = folder.data_path(record)
    samples = []
    for chunk_rows in (250, 4096):
        original = scan_module.read_chunks
        scan_module.read_chunks = lambda *a, **k: original(*a, **{**k, "chunk_rows": chunk_rows})
        try:
            scan_module.SAMPLE_ROWS, limit = 1000, scan_module.SAMPLE_ROWS
            found = scan_module.scan([path], [record], folder.model, folder.plan)
        finally:
            scan_module.read_chunks, scan_module.SAMPLE_ROWS = original, limit
        samples.append(found.sample_inputs)
    assert samples[0].shape == (1000, folder.model.n_inputs)
    np.testing.assert_array_equal(samples[0], samples[1])
    # A uniform sample: its mean lies within 4 standard errors of the whole file's (central limit theorem).
    data = pd.read_csv(path)[list(folder.model.inputs)].to_numpy()
    error = data.std(axis=0) / np.sqrt(1000)
    assert np.all(np.abs(samples[0].mean(axis=0) - data.mean(axis=0)) < 4 * error)


# --- in a real browser ------------------------------------------------------------------------------


def test_page_renders_in_chromium_offline(build):
    from PIL import Image

    from browser import visit

    chromium = require("chromium")
    seen = visit(chromium, build / "report.html", width=1366, height=900, full_page=False)
    page_url = (build / "report.html").resolve().as_uri()
    assert all(url == page_url or url.startswith("data:") for url in seen.requests), seen.requests
    assert not seen.failed_requests and not seen.messages
    assert len(seen.images) >= 8
    for image in seen.images:  # decoded: a broken image has naturalWidth 0
        assert image["complete"] and image["width"] > 200 and image["height"] > 100, image
    assert seen.text_length > 3000 and seen.page_height > 5000
    screenshot = np.asarray(Image.open(io.BytesIO(seen.screenshot)).convert("RGB"))
    assert screenshot.shape == (900, 1366, 3)
    colours = np.unique(screenshot.reshape(-1, 3), axis=0)
    assert len(colours) > 100 and screenshot.std() > 20  # not blank: text, tiles and the masthead drawn
    # Printed on A4 with the print style sheet: a PDF of several pages (PDF 1.4: one /Type /Page per page).
    assert seen.pdf.startswith(b"%PDF-") and len(re.findall(rb"/Type\s*/Page[^s]", seen.pdf)) >= 4
