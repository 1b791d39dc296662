#!/usr/bin/env python
"""Regenerate the Python code of the wire contract from ``proto/trendmill/v1``.

Usage::

    python scripts/gen_proto.py            # rewrite client/trendmill_client/_proto
    python scripts/gen_proto.py --check    # exit 1 when the committed code is stale

The generated modules are flattened into ``trendmill_client/_proto/`` and their
``from trendmill.v1 import x_pb2`` lines are rewritten into relative imports,
so the generated package never shadows or collides with the ``trendmill``
package of the server. The output depends only on the .proto files and the
installed grpcio-tools (whose protoc version is stamped in each file).
"""

from __future__ import annotations

import argparse
import filecmp
import re
import shutil
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PROTO_ROOT = ROOT / "proto"
PROTO_DIR = PROTO_ROOT / "trendmill" / "v1"
OUT_DIR = ROOT / "client" / "trendmill_client" / "_proto"

_INIT = '''"""Generated from proto/trendmill/v1 by scripts/gen_proto.py; do not edit."""
'''
# `from trendmill.v1 import spec_pb2 as trendmill_dot_v1_dot_spec__pb2`
_ABS_IMPORT = re.compile(r"^from trendmill\.v1 import (\w+)", re.MULTILINE)


def proto_files() -> list[Path]:
    """The .proto files of the API, sorted (protoc output order follows them)."""
    return sorted(PROTO_DIR.glob("*.proto"))


def generate(out_dir: Path) -> list[str]:
    """Generate the flattened, relative-import modules into ``out_dir``.

    Returns the names of the files written.
    """
    from grpc_tools import protoc  # only the generator needs grpcio-tools

    import importlib.resources

    wkt = str(importlib.resources.files("grpc_tools") / "_proto")
    out_dir.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        args = [
            "grpc_tools.protoc",
            f"-I{PROTO_ROOT}",
            f"-I{wkt}",
            f"--python_out={tmp}",
            f"--pyi_out={tmp}",
            f"--grpc_python_out={tmp}",
            *[str(p.relative_to(PROTO_ROOT)) for p in proto_files()],
        ]
        # protoc resolves the relative names against -I; run from the root so
        # no absolute path of this checkout leaks into the output.
        rc = protoc.main(args)
        if rc != 0:
            raise SystemExit(f"protoc failed with exit status {rc}")
        written = []
        for src in sorted((Path(tmp) / "trendmill" / "v1").iterdir()):
            text = _ABS_IMPORT.sub(r"from . import \1", src.read_text())
            # Classes record this as their __module__: name the real module.
            text = text.replace("(DESCRIPTOR, 'trendmill.v1.", "(DESCRIPTOR, 'trendmill_client._proto.")
            (out_dir / src.name).write_text(text)
            written.append(src.name)
    (out_dir / "__init__.py").write_text(_INIT)
    written.append("__init__.py")
    return sorted(written)


def stale_files(committed: Path = OUT_DIR) -> list[str]:
    """Names of files that differ between ``committed`` and a fresh generation."""
    with tempfile.TemporaryDirectory() as tmp:
        fresh = Path(tmp)
        names = set(generate(fresh))
        have = {p.name for p in committed.glob("*.py*")} if committed.is_dir() else set()
        return sorted(
            n for n in names | have
            if n not in names or n not in have
            or not filecmp.cmp(fresh / n, committed / n, shallow=False)
        )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true",
                        help="only report whether the committed code is stale")
    args = parser.parse_args(argv)
    if args.check:
        stale = stale_files()
        if stale:
            print(f"stale generated code: {', '.join(stale)}; run scripts/gen_proto.py",
                  file=sys.stderr)
            return 1
        return 0
    if OUT_DIR.exists():
        # Remove modules of deleted .proto files, keep nothing by hand here.
        shutil.rmtree(OUT_DIR)
    for name in generate(OUT_DIR):
        print(OUT_DIR.relative_to(ROOT) / name)
    return 0


if __name__ == "__main__":
    sys.exit(main())
