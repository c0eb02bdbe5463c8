"""quadrat's shell: the command language, the prompt, batch runs and session files."""

from __future__ import annotations

try:
    from importlib.metadata import PackageNotFoundError, version as _version

    __version__ = _version("quadrat")
except PackageNotFoundError:  # run from a checkout that was not installed
    __version__ = "0.1.0+checkout"
