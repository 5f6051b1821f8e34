"""The project: one file, ``affix.toml``, that holds every choice of fit,
quantize, emit and verify, so a recalibration is one command (``affix build``).
"""
from affix.project.file import PROJECT_FILE, InputColumn, OutputColumn, Project, load_project

__all__ = ["PROJECT_FILE", "InputColumn", "OutputColumn", "Project", "load_project"]
