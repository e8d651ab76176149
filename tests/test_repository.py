"""The repository refers only to itself: no file outside it is cited, no source anchor dangles.

Sources are cited by anchor, ``[R-...]``, of docs/references.md (see DEVELOPERS.md). The files
checked are those git tracks (``git ls-files``); without git, the tree is walked, skipping virtual
environments, caches and build output.
"""

from __future__ import annotations

import os
import re
import subprocess
from pathlib import Path


def _repository_root() -> Path:
    """The directory holding pyproject.toml above this file (the test may move into a subfolder)."""
    here = Path(__file__).resolve().parent
    for folder in (here, *here.parents):
        if (folder / "pyproject.toml").is_file():
            return folder
    raise RuntimeError(f"no pyproject.toml above {here}")


ROOT = _repository_root()
REFERENCES = ROOT / "docs" / "references.md"

#: Directories never walked when git is not available.
SKIP_DIRS = {".git", ".venv", "venv", "env", "__pycache__", ".pytest_cache", ".ruff_cache",
             ".mypy_cache", ".hypothesis", ".tox", ".nox", "build", "dist", ".eggs"}

#: Names of files outside the repository and paths that lead out of it, matched without regard
#: to case. Built from parts so that this file does not name them itself.
FORBIDDEN = tuple(part.lower().encode() for part in (
    "physics" + ".md", "checks" + ".md", "practice" + ".md", ".." + "/shared", "/" + "work/"))

#: A cited anchor, e.g. [R-time-T5].
ANCHOR = re.compile(r"\[(R-[A-Za-z0-9][A-Za-z0-9-]*)\]")

#: An anchor's definition in docs/references.md: at the start of a heading or of a table row.
DEFINITION = re.compile(r"^(?:#{2,6} |\| )\[(R-[A-Za-z0-9][A-Za-z0-9-]*)\]")


def repository_files(root: Path = ROOT) -> list[Path]:
    """Files git tracks under ``root``, or, without git, every file of the tree."""
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=root, capture_output=True,
                             check=True, timeout=60).stdout
    except (OSError, subprocess.SubprocessError):
        out = b""
    if out:
        names = [n for n in out.decode("utf-8", errors="surrogateescape").split("\0") if n]
        return sorted(p for p in (root / n for n in names) if p.is_file())
    found = []
    for folder, dirs, files in os.walk(root):
        dirs[:] = [d for d in dirs if d not in SKIP_DIRS and not d.endswith(".egg-info")]
        found += [Path(folder) / f for f in files]
    return sorted(found)


def is_binary(data: bytes) -> bool:
    """A NUL byte in the first 8 kB marks a binary file (PNG, HDF5)."""
    return b"\0" in data[:8192]


def outside_references(paths: list[Path], root: Path = ROOT) -> list[str]:
    """``path: string`` for every forbidden string found, binary files included."""
    hits = []
    for path in paths:
        data = path.read_bytes().lower()
        hits += [f"{path.relative_to(root)}: {s.decode()}" for s in FORBIDDEN if s in data]
    return hits


def defined_anchors(references: Path = REFERENCES) -> list[str]:
    """Anchors defined in ``references``, in order, repeats kept."""
    text = references.read_text(encoding="utf-8")
    return [m.group(1) for m in map(DEFINITION.match, text.splitlines()) if m]


def dangling_anchors(paths: list[Path], defined: set[str], root: Path = ROOT) -> list[str]:
    """``path:line: [anchor]`` for every cited anchor that ``defined`` lacks (text files only)."""
    missing = []
    for path in paths:
        data = path.read_bytes()
        if is_binary(data):
            continue
        for number, line in enumerate(data.decode("utf-8", errors="replace").splitlines(), 1):
            missing += [f"{path.relative_to(root)}:{number}: [{name}]"
                        for name in ANCHOR.findall(line) if name not in defined]
    return missing


def test_no_file_refers_outside_the_repository():
    paths = repository_files()
    assert REFERENCES in paths or not (ROOT / ".git").exists()
    assert outside_references(paths) == []


def test_every_cited_anchor_is_defined_in_references():
    defined = set(defined_anchors())
    assert "R-labels" in defined                    # the parser reads the file's own format
    assert dangling_anchors(repository_files(), defined) == []


def test_anchors_are_defined_once():
    names = defined_anchors()
    assert sorted({n for n in names if names.count(n) > 1}) == []


def test_the_checks_find_what_they_look_for(tmp_path):
    """Both scanners report a planted outside reference and a planted dangling anchor.

    The planted strings are built from parts, so that this file passes its own checks.
    """
    kept, row, gone = ("[R-" + name + "]" for name in ("kept", "row", "gone"))
    outside_name, outside_path = FORBIDDEN[0].decode(), FORBIDDEN[-1].decode()
    refs = tmp_path / "refs.md"
    refs.write_text(f"### {kept} A heading\n\n| {row} | a row |\n\nText cites {kept}.\n",
                    encoding="utf-8")
    bad = tmp_path / "bad.py"
    bad.write_text(f"# see {outside_name.upper()} and {kept}, {row}, {gone}\n", encoding="utf-8")
    blob = tmp_path / "blob.h5"
    blob.write_bytes(b"\0\x89HDF" + outside_path.encode() + b"x" + gone.encode())
    assert defined_anchors(refs) == [kept[1:-1], row[1:-1]]
    assert outside_references([refs, bad, blob], tmp_path) == [f"bad.py: {outside_name}",
                                                                f"blob.h5: {outside_path}"]
    assert dangling_anchors([refs, bad, blob], {kept[1:-1], row[1:-1]}, tmp_path) == \
        [f"bad.py:1: {gone}"]
