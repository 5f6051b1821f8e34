"""The TOML reader: the standard library's tomllib from Python 3.11, the
same code as the tomli package before (pyproject requires it there)."""
import sys

if sys.version_info >= (3, 11):
    import tomllib
else:
    import tomli as tomllib

__all__ = ["tomllib"]
