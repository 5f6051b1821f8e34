"""The build report: one self-contained HTML page of the plots an engineer checks before shipping.

``write_report(build_dir)`` reads a build folder (:mod:`affix.report.build_folder`),
makes one streaming pass over its calibration data (:mod:`affix.report.scan`),
works out what to show (:mod:`affix.report.content`), draws it
(:mod:`affix.report.plots`, matplotlib) and renders
``codegen_templates/report/page.html.jinja`` (:mod:`affix.report.page`) into
``build_dir/report.html``.  The page loads nothing: every image and style is
inline, and its content security policy forbids any request.
"""
from __future__ import annotations

import contextlib
import importlib.util
from pathlib import Path

from affix import files
from affix.errors import ToolError

REPORT_FILE = "report.html"
INSTALL_HINT = "pip install 'affix[report]'"


def write_report(build_dir, *, location=None) -> Path:
    """Write ``build_dir/report.html`` and return its path.

    ``location`` is where the folder will be read from when it differs from
    ``build_dir`` (a build stages its folder, which then takes the build
    folder's place): build.json's relative paths start there.

    Raises FileFormatError (exit status 2) when the folder lacks or garbles
    model.json, plan.json or the manifest, and ToolError (4) when matplotlib,
    the report's one extra dependency, is not installed.
    """
    text = render_report(build_dir, location=location)
    path = Path(build_dir) / REPORT_FILE
    files.write_text(path, text, parameter="build_dir")
    return path


def render_report(build_dir, *, record: dict | None = None, location=None) -> str:
    """The report page of ``build_dir`` as text, for a caller that writes it itself.

    A build that writes build.json last (its list of file hashes includes
    report.html's) passes the record it is about to write as ``record``, and
    ``location`` as for :func:`write_report`.  Errors as :func:`write_report`.
    """
    if importlib.util.find_spec("matplotlib") is None:
        raise ToolError(f"the report needs matplotlib, which is not installed: {INSTALL_HINT}")
    from affix.report.build_folder import read_build_folder

    folder = read_build_folder(build_dir, record=record, location=location)
    records = folder.build.data if folder.build else ()
    paths = [folder.data_path(data) for data in records]
    with _data_pass(paths, records, folder) as scanned:
        from affix.report.page import render_page, sections_without_data  # matplotlib loads here

        drawn = sections_without_data(folder)
        return render_page(folder, scanned(), drawn)


@contextlib.contextmanager
def _data_pass(paths, records, folder):
    """A function giving the data scan.  Large files are read by a forked worker process while this one
    loads matplotlib and draws the sections that need no data: on two cores the pass costs no wall time
    beyond the drawing's.  Small ones are read here, where a process would cost more than it saves."""
    from affix.fit.passes import PARALLEL_MIN_BYTES, usable_cpus
    from affix.report.scan import scan

    size = sum(path.stat().st_size for path in paths if path.is_file())
    if usable_cpus() < 2 or size < PARALLEL_MIN_BYTES:
        yield lambda: scan(paths, records, folder.model, folder.plan)
        return
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("fork")) as pool:
        job = pool.submit(scan, paths, records, folder.model, folder.plan)
        yield job.result
