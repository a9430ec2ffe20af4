"""The core is plain numpy/scipy: it must import in a fresh interpreter without Django."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_engineering_package_imports_without_django():
    code = (
        "import sys, fleet.engineering, fleet.engineering.trends, fleet.engineering.drift, "
        "fleet.engineering.nameplate, fleet.engineering.planning, fleet.engineering.rules, "
        "fleet.engineering.substitutes; "
        "loaded = [m for m in sys.modules if m == 'django' or m.startswith('django.')]; "
        "print(loaded); sys.exit(1 if loaded else 0)"
    )
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, env={"PATH": ""})
    assert result.returncode == 0, result.stdout + result.stderr
