"""plotly.min.js as a static file, taken from the installed plotly package.

The browser library is the one the pinned plotly release ships (its Python figures and its
JavaScript match), never a copy kept in git. Only that one file is exposed, under
`plotly/`, so collectstatic hashes and compresses it like our own files and WhiteNoise
serves it with a long cache lifetime.
"""

from __future__ import annotations

from pathlib import Path

import plotly
from django.contrib.staticfiles.finders import BaseFinder
from django.core.files.storage import FileSystemStorage

PLOTLY_DIRECTORY = Path(plotly.__file__).resolve().parent / "package_data"
PLOTLY_FILE = "plotly.min.js"
PLOTLY_PREFIX = "plotly"
PLOTLY_STATIC_PATH = f"{PLOTLY_PREFIX}/{PLOTLY_FILE}"


class PlotlyFinder(BaseFinder):
    """Finds `plotly/plotly.min.js` in the plotly package, and nothing else."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.storage = FileSystemStorage(location=PLOTLY_DIRECTORY)
        self.storage.prefix = PLOTLY_PREFIX

    def check(self, **kwargs):
        return []

    def find(self, path, find_all=False, **kwargs):
        if path != PLOTLY_STATIC_PATH:
            return [] if find_all or kwargs.get("all") else None
        found = str(PLOTLY_DIRECTORY / PLOTLY_FILE)
        return [found] if find_all or kwargs.get("all") else found

    def list(self, ignore_patterns):
        yield PLOTLY_FILE, self.storage
