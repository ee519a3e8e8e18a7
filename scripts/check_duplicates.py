"""Fail when the library code repeats itself beyond the pairs kept on purpose.

Runs the workplace's ``duplicates`` command over ``src/`` and compares the pairs of
places it lists (files sharing six or more lines of the same shape) with the allow-list
``.ci/duplicates-allow.txt``: one pair of files per line, ``a.py b.py  # why``.  A pair
not on the list fails the check; so does a listed pair that no longer occurs (keep the
list honest).  Where the command is not installed the check says so and passes: it is a
review aid of this workplace, not a dependency of the project.

Run: ``python scripts/check_duplicates.py`` (from the repository root).
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
ALLOW = ROOT / ".ci" / "duplicates-allow.txt"
ROW = re.compile(r"^D\d+\s+(\S+?):\d+-\d+\s+~\s+(\S+?):\d+-\d+")


def allowed() -> dict[frozenset, str]:
    out = {}
    for line in ALLOW.read_text(encoding="utf-8").splitlines():
        body, _, why = line.partition("#")
        parts = body.split()
        if not parts:
            continue
        if len(parts) != 2 or not why.strip():
            sys.exit(f"{ALLOW}: each line is 'a.py b.py  # why', got {line!r}")
        out[frozenset(parts)] = why.strip()
    return out


def found() -> set[frozenset]:
    cmd = ["duplicates", "--repo", str(ROOT / "src"), "--most", "200", "--seconds", "120"]
    text = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    if "incomplete:" in text:
        sys.exit(f"the duplicate scan did not finish: {text.splitlines()[-1]}")
    pairs = set()
    for line in text.splitlines():
        m = ROW.match(line.strip())
        if m:
            pairs.add(frozenset((m.group(1), m.group(2))))
    return pairs


def main() -> int:
    if shutil.which("duplicates") is None:
        print("note: the duplicates command is not installed here; the repetition check was skipped")
        return 0
    allow = allowed()
    pairs = found()
    new = sorted(" ~ ".join(sorted(p)) for p in pairs if p not in allow)
    stale = sorted(" ~ ".join(sorted(p)) for p in allow if p not in pairs)
    for p in new:
        print(f"repeated code not on the allow-list: {p}")
    for p in stale:
        print(f"allow-list entry no longer repeated (remove it): {p}")
    if new or stale:
        return 1
    print(f"repetition check: {len(pairs)} pairs, all on the allow-list")
    return 0


if __name__ == "__main__":
    sys.exit(main())
