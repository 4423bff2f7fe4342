"""The robustness benchmark rewrites only its own section of bench/robustness.md."""

from __future__ import annotations

from pathlib import Path

from bench.robustness_service import MARK_BEGIN, MARK_END, TITLE, write_section


def test_only_the_service_section_is_rewritten(tmp_path: Path) -> None:
    path = tmp_path / "robustness.md"
    write_section(path, "first")
    assert path.read_text().startswith(TITLE)
    other = "<!-- engine:begin -->\nengine figures\n<!-- engine:end -->\n"
    path.write_text(path.read_text() + "\n" + other)
    write_section(path, "second")
    text = path.read_text()
    assert text.count(MARK_BEGIN) == text.count(MARK_END) == 1
    assert "second" in text and "first" not in text
    assert text.endswith(other) and text.startswith(TITLE)
    before = tmp_path / "before.md"
    before.write_text("# Robustness (issue 9)\n\n" + other)
    write_section(before, "third")
    assert before.read_text().startswith("# Robustness (issue 9)\n\n" + other)
