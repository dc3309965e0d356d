"""Pseudonyms (keyed hash), key files and retention cut-offs."""

from __future__ import annotations

import logging
import stat
from datetime import UTC, datetime, timedelta

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rankrec.privacy import is_pseudonym, load_key, new_key, pseudonym, retention_cutoff

# RFC 4231 ("Identifier and Test Vectors for HMAC-SHA-224, -256, -384, -512"), section 4:
# (key, data, HMAC-SHA-256). A pseudonym is "p-" and the first 32 hex digits of it.
RFC_4231 = [
    (b"\x0b" * 20, "Hi There", "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),  # case 1
    (
        b"Jefe",
        "what do ya want for nothing?",
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843",
    ),
    (
        b"\xaa" * 131,  # case 6: a key longer than the block size is hashed first
        "Test Using Larger Than Block-Size Key - Hash Key First",
        "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54",
    ),
]


@pytest.mark.parametrize(("key", "data", "mac"), RFC_4231, ids=["case1", "case2", "case6"])
def test_pseudonym_is_truncated_hmac_sha256_of_rfc_4231(key, data, mac):
    assert pseudonym(key, data) == "p-" + mac[:32]


@settings(max_examples=60, deadline=None)
@given(user=st.text(min_size=1, max_size=40), other=st.text(min_size=1, max_size=40))
def test_pseudonyms_are_stable_distinct_and_recognisable(user, other):
    key = bytes(range(32))
    assert pseudonym(key, user) == pseudonym(key, user)
    assert is_pseudonym(pseudonym(key, user))
    if user != other:  # 128-bit truncation: a collision among 60 draws would be a bug, not bad luck
        assert pseudonym(key, user) != pseudonym(key, other)
    assert pseudonym(key, user) != pseudonym(bytes(reversed(range(32))), user)


def test_plain_ids_are_not_taken_for_pseudonyms():
    assert not is_pseudonym("ines.halvorsen")
    assert not is_pseudonym("p-short")
    assert not is_pseudonym("p-" + "G" * 32)


def test_pseudonym_refuses_bad_arguments():
    with pytest.raises(TypeError, match="key must be bytes"):
        pseudonym("text key", "ines")
    with pytest.raises(TypeError, match="user must be a string"):
        pseudonym(b"k" * 32, 7)
    with pytest.raises(ValueError, match="user must not be empty"):
        pseudonym(b"k" * 32, "")


def test_new_key_is_private_random_and_loads_back(tmp_path):
    path = tmp_path / "pseudonym.key"
    key = new_key(path)
    # POSIX permission bits: 0600 is read/write for the owner only.
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert len(key) == 32 and load_key(path) == key
    assert new_key(tmp_path / "other.key") != key
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.key", "pseudonym.key"]  # no staging left


def test_new_key_never_replaces_a_key(tmp_path):
    path = tmp_path / "pseudonym.key"
    key = new_key(path)
    with pytest.raises(FileExistsError):
        new_key(path)
    assert load_key(path) == key
    assert [p.name for p in tmp_path.iterdir()] == ["pseudonym.key"]


def test_load_key_refuses_what_is_not_a_key(tmp_path):
    path = tmp_path / "bad.key"
    path.write_text("not hex at all\n")
    with pytest.raises(ValueError, match="does not hold hex digits"):
        load_key(path)
    path.write_text("00ff\n")
    with pytest.raises(ValueError, match="has 2 bytes; at least 16"):
        load_key(path)


def test_load_key_warns_about_a_readable_key_file(tmp_path, caplog):
    path = tmp_path / "open.key"
    path.write_text("ab" * 32 + "\n")
    path.chmod(0o644)
    with caplog.at_level(logging.WARNING, logger="rankrec.privacy"):
        assert load_key(path) == bytes.fromhex("ab" * 32)
    assert "readable by others" in caplog.text


@pytest.mark.parametrize("days", [1, 30, 365])
def test_retention_cutoff_matches_calendar_arithmetic(days):
    # Python's datetime/timedelta arithmetic (UTC, no leap seconds in Unix time) as the reference.
    now = datetime(2026, 3, 29, 12, 0, tzinfo=UTC)
    assert retention_cutoff(days, now.timestamp()) == (now - timedelta(days=days)).timestamp()


def test_retention_cutoff_defaults_to_the_clock():
    before = datetime.now(UTC).timestamp()
    cutoff = retention_cutoff(2)
    assert before - 2 * 86400 <= cutoff <= datetime.now(UTC).timestamp() - 2 * 86400


@pytest.mark.parametrize(
    ("days", "now", "error"),
    [
        (0, None, ValueError),
        (-3, None, ValueError),
        (1.5, None, TypeError),
        (True, None, TypeError),
        (7, float("nan"), ValueError),
        (7, "today", ValueError),
    ],
)
def test_retention_cutoff_refuses_bad_arguments(days, now, error):
    with pytest.raises(error, match="days|now"):
        retention_cutoff(days, now)
