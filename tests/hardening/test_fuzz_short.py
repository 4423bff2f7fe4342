"""A short, fixed-count run of the input fuzzer (bench/fuzz_inputs.py runs it for longer):
every mutant of the bad-input corpus is read or refused with a domain error."""

from __future__ import annotations

from pathlib import Path

from bench.fuzz_inputs import fuzz


def test_mutants_of_the_corpus_raise_only_domain_errors(tmp_path: Path) -> None:
    report = fuzz(iterations=300, seed=7, keep=tmp_path)
    assert report.tried == 300
    assert report.findings == [], report.findings[0][1]
    assert report.answers["bad-input"] > 100 and report.answers["read"] > 0
