"""No client-given text becomes a path outside the data folder (property-based)."""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.builtin import upload_id_of
from service.jobs import JobStore, is_id

_HEX = st.text(alphabet="0123456789abcdef", min_size=32, max_size=32)


@given(st.text(max_size=200) | st.builds(lambda a, b: a + "/uploads/" + b, st.text(),
                                         st.text()))
def test_an_href_yields_a_plain_id_or_nothing(href: str) -> None:
    found = upload_id_of(href)
    assert found is None or (is_id(found) and "/" not in found and "." not in found)


@given(_HEX, st.sampled_from(["http://127.0.0.1:8000", "https://far.example/x", ""]))
def test_an_upload_href_is_recognised_whatever_the_host(upload_id: str, host: str) -> None:
    assert upload_id_of(f"{host}/uploads/{upload_id}") == upload_id


@given(st.text(max_size=80).filter(lambda t: not is_id(t)))
def test_folders_are_only_made_for_ids(text: str) -> None:
    store = JobStore.__new__(JobStore)
    store.data_dir = Path("/srv/rutwise")
    for folder_of in (store.job_dir, store.upload_dir):
        with pytest.raises(ValueError):
            folder_of(text)


def test_unknown_ids_are_not_found_not_errors(tmp_path: Path) -> None:
    store = JobStore(tmp_path)
    for text in ("../../etc/passwd", "", "A" * 32, "0" * 32):
        assert store.get_job(text) is None and store.get_upload(text, "") is None
