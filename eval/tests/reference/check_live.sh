#!/usr/bin/env bash
# Regenerates the reference values live and fails when they differ from the
# committed eval/tests/reference/reference.json, so the offline cross-checks of
# eval/tests/reference.rs stay honest. Creates a fresh virtual environment in a
# temporary folder, installs the reference libraries at the versions recorded
# in reference.json, runs make_reference.py into a temporary file and compares
# every number (relative tolerance 1e-12) and every other value exactly;
# "versions" (the library and Python versions) is metadata and not compared.
#
#   eval/tests/reference/check_live.sh
#
# Exit status: 0 when equal, 1 with a summary of the differences, 2 when the
# environment could not be set up.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
committed="$here/reference.json"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
started=$(date +%s)

python3 -m venv "$tmp/venv" || { echo "check_live: python3 -m venv failed" >&2; exit 2; }
py="$tmp/venv/bin/python"

# The versions to install, read from the committed file.
mapfile -t pins < <("$py" - "$committed" <<'PY'
import json, sys
v = json.load(open(sys.argv[1]))["versions"]
for name in ["numpy", "scipy", "scikit-learn", "pycocotools", "mean-average-precision"]:
    print(f"{name}=={v[name]}")
PY
)
echo "check_live: installing ${pins[*]}"
"$py" -m pip install --quiet --disable-pip-version-check "${pins[@]}" \
  || { echo "check_live: pip install failed" >&2; exit 2; }

"$py" "$here/make_reference.py" "$tmp/reference.json" >/dev/null

"$py" - "$committed" "$tmp/reference.json" <<'PY'
import json, math, sys

committed = json.load(open(sys.argv[1]))
live = json.load(open(sys.argv[2]))
REL = 1e-12
diffs = []


def walk(a, b, path):
    if path == "$.versions":
        return
    if isinstance(a, bool) or isinstance(b, bool) or a is None or b is None or isinstance(a, str) or isinstance(b, str):
        if a != b:
            diffs.append(f"{path}: committed {a!r}, live {b!r}")
        return
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        if isinstance(a, float) and math.isnan(a) and isinstance(b, float) and math.isnan(b):
            return
        if abs(a - b) > REL * max(abs(a), abs(b)):
            diffs.append(f"{path}: committed {a!r}, live {b!r} (relative difference {abs(a - b) / max(abs(a), abs(b)):.3g})")
        return
    if isinstance(a, dict) and isinstance(b, dict):
        for k in sorted(set(a) | set(b)):
            if k not in a or k not in b:
                diffs.append(f"{path}.{k}: only in {'live' if k not in a else 'committed'}")
            else:
                walk(a[k], b[k], f"{path}.{k}")
        return
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            diffs.append(f"{path}: length committed {len(a)}, live {len(b)}")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            walk(x, y, f"{path}[{i}]")
        return
    diffs.append(f"{path}: committed {type(a).__name__} {a!r}, live {type(b).__name__} {b!r}")


walk(committed, live, "$")
if committed.get("versions") != live.get("versions"):
    print(f"check_live: note: versions committed {committed.get('versions')}, live {live.get('versions')}")
if diffs:
    print(f"check_live: {len(diffs)} value(s) differ from {sys.argv[1]}:")
    for d in diffs[:40]:
        print("  " + d)
    if len(diffs) > 40:
        print(f"  ... and {len(diffs) - 40} more")
    sys.exit(1)
print("check_live: every reference value matches the committed file")
PY
echo "check_live: done in $(( $(date +%s) - started )) s"
