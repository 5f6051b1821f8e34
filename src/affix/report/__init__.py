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

import importlib.util
from pathlib import Path

from affix import files
from affix.errors import ToolError

REPORT_FILE = "report.html"
INSTALL_HINT = "pip install 'affix[report]'"


def write_report(build_dir) -> Path:
    """Write ``build_dir/report.html`` and return its path.

    Raises FileFormatError (exit status 2) when the folder lacks or garbles
    model.json, plan.json or the manifest, and ToolError (4) when matplotlib,
    the report's one extra dependency, is not installed.
    """
    if importlib.util.find_spec("matplotlib") is None:
        raise ToolError(f"the report needs matplotlib, which is not installed: {INSTALL_HINT}")
    from affix.report.build_folder import read_build_folder
    from affix.report.page import render_page
    from affix.report.scan import scan

    folder = read_build_folder(build_dir)
    data = folder.build.data if folder.build else ()
    found = scan([folder.data_path(d) for d in data], data, folder.model, folder.plan)
    path = Path(build_dir) / REPORT_FILE
    files.write_text(path, render_page(folder, found), parameter="build_dir")
    return path
