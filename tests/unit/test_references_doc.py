"""Citations stay inside the repository and point at entries of docs/references.md."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
REFERENCES = REPO / "docs" / "references.md"
# Built in two pieces so that this file does not match itself.
OUTSIDE_HANDBOOK = "REFERENCE" + ".md"
CITATION = re.compile(r"docs/references\.md R(\d+)")


def _tracked_text_files() -> list[tuple[str, str]]:
    """Return (path, text) for every tracked file that decodes as UTF-8."""
    try:
        listing = subprocess.run(
            ["git", "ls-files", "-z"], cwd=REPO, check=True, capture_output=True
        ).stdout
    except (OSError, subprocess.CalledProcessError):
        pytest.skip("not a git checkout")
    files = []
    for name in listing.decode().split("\0"):
        path = REPO / name
        if not name or not path.is_file():
            continue
        try:
            files.append((name, path.read_text(encoding="utf-8")))
        except UnicodeDecodeError:
            continue  # binary files cannot cite anything
    return files


def test_no_tracked_file_cites_the_outside_handbook():
    offenders = [name for name, text in _tracked_text_files() if OUTSIDE_HANDBOOK in text]
    assert offenders == []


def test_every_cited_entry_has_an_anchor():
    anchors = set(re.findall(r'<a id="R(\d+)"></a>', REFERENCES.read_text(encoding="utf-8")))
    cited = {
        (name, number) for name, text in _tracked_text_files() for number in CITATION.findall(text)
    }
    assert cited, "the citation pattern should find the code's citations"
    missing = sorted((name, number) for name, number in cited if number not in anchors)
    assert missing == []
