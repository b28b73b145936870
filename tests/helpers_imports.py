"""What a fresh Python process imports: for the tests that keep ``import mixsolve`` and
``mixsolve --help`` quick."""

from __future__ import annotations

import json
import subprocess
import sys

NUMERICAL = ("numpy", "scipy", "pandas", "xarray", "sklearn", "pint")


def numerical_imports(code: str) -> list[str]:
    """Run ``code`` in a fresh interpreter; return the numerical libraries it imported."""
    return _imported_after(code, "{m.split('.')[0] for m in sys.modules}", NUMERICAL)


def modules_after(code: str, names: tuple[str, ...]) -> list[str]:
    """Run ``code`` in a fresh interpreter; return which of the modules ``names`` (full
    dotted names) it imported."""
    return _imported_after(code, "set(sys.modules)", names)


def _imported_after(code: str, held: str, names: tuple[str, ...]) -> list[str]:
    """Run ``code``, then print the sorted ``names`` found in ``held`` (an expression over
    ``sys.modules``) as JSON; return them."""
    report = f"\nimport json, sys\nprint(json.dumps(sorted({held} & set({names!r}))))\n"
    run = subprocess.run([sys.executable, "-c", code + report], capture_output=True,
                         text=True, check=False, timeout=120)
    assert run.returncode == 0, run.stderr
    return json.loads(run.stdout.strip().splitlines()[-1])
