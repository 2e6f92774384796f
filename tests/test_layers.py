"""The direction of imports between layers (import-linter's ``layers`` contract in
pyproject.toml): a test, so `make test` fails on a leak as `make lint` does."""

import shutil
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def test_layers_contract_holds():
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent))
    assert exe, "import-linter is a test dependency (pip install -e '.[test]')"
    r = subprocess.run([exe, "--no-cache"], cwd=REPO, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    assert "0 broken" in r.stdout
