"""The committed generated code matches the .proto files (regenerated into a temp dir)."""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def _gen():
    spec = importlib.util.spec_from_file_location("gen_proto", REPO / "scripts" / "gen_proto.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_generated_code_is_fresh():
    stale = _gen().stale_files()
    assert stale == [], f"stale generated code {stale}: run python scripts/gen_proto.py"


def test_generated_imports_are_relative():
    for path in (REPO / "client" / "trendmill_client" / "_proto").glob("*.py"):
        text = path.read_text()
        assert "from trendmill.v1" not in text and "import trendmill.v1" not in text, path.name


def test_check_mode_exit_status():
    rc = subprocess.run([sys.executable, str(REPO / "scripts" / "gen_proto.py"), "--check"],
                        capture_output=True, text=True)
    assert rc.returncode == 0, rc.stderr
