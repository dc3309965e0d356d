"""The tokens file: only hashes stored, atomic writes with mode 0600, duplicate names refused, revocation,
viewer keys and the signed viewer assertions made with them."""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import stat

import pytest

from rankrec.cli import main
from rankrec.errors import InputError
from rankrec.tokens import (
    add_token,
    add_viewer_key,
    check_token,
    check_viewer_assertion,
    load_tokens,
    revoke_token,
    viewer_assertion,
    viewer_key_of,
)


def test_only_the_sha256_of_a_token_is_stored(tmp_path):
    path = tmp_path / "tokens.json"
    token = add_token(path, "wiki-frontend", "reader")
    text = path.read_text()
    assert token not in text
    entry = json.loads(text)["tokens"][0]
    # FIPS 180-4 SHA-256 through hashlib, hex digest of the UTF-8 token
    assert entry["sha256"] == hashlib.sha256(token.encode()).hexdigest()
    assert entry["name"] == "wiki-frontend" and entry["role"] == "reader"
    assert stat.S_IMODE(path.stat().st_mode) == 0o600


def test_tokens_are_random_url_safe_and_long(tmp_path):
    path = tmp_path / "tokens.json"
    tokens = [add_token(path, f"client-{i}", "reader") for i in range(5)]
    assert len(set(tokens)) == 5
    # secrets.token_urlsafe(32): 32 random bytes in base64url (RFC 4648 section 5) without padding: 43 chars
    assert all(
        len(token) == 43
        and set(token) <= set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_")
        for token in tokens
    )


def test_check_token_finds_the_name_and_role(tmp_path):
    path = tmp_path / "tokens.json"
    reader = add_token(path, "frontend", "reader")
    admin = add_token(path, "ops", "admin")
    entries = load_tokens(path)
    assert check_token(entries, reader) == ("frontend", "reader")
    assert check_token(entries, admin) == ("ops", "admin")
    assert check_token(entries, "") is None and check_token(entries, reader.upper()) is None
    assert check_token((), reader) is None


def test_bad_names_roles_and_duplicates_are_refused(tmp_path):
    path = tmp_path / "tokens.json"
    add_token(path, "frontend", "reader")
    with pytest.raises(ValueError, match="already has a token"):
        add_token(path, "frontend", "admin")
    with pytest.raises(ValueError, match="role"):
        add_token(path, "other", "owner")
    for name in ("", "-leading", "has space", "x" * 65, "slash/name"):
        with pytest.raises(ValueError, match="name"):
            add_token(path, name, "reader")
    assert [entry.name for entry in load_tokens(path)] == ["frontend"]


def test_a_failed_write_leaves_the_old_file(tmp_path, monkeypatch):
    path = tmp_path / "tokens.json"
    add_token(path, "frontend", "reader")
    before = path.read_bytes()

    def broken(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr("rankrec.tokens.os.replace", broken)
    with pytest.raises(OSError, match="disk full"):
        add_token(path, "second", "reader")
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["tokens.json"]  # no staging file left behind


@pytest.mark.parametrize(
    "content, reason",
    [
        ("{not json", "not a readable"),
        ('{"format": 2, "tokens": []}', "expected"),
        ('{"format": 1, "tokens": [{"name": "a"}]}', "expected fields"),
        (
            '{"format": 1, "tokens": [{"name": "a", "role": "root", "sha256": "'
            + "0" * 64
            + '", "created": ""}]}',
            "role",
        ),
        (
            '{"format": 1, "tokens": [{"name": "a", "role": "admin", "sha256": "xyz", "created": ""}]}',
            "sha256",
        ),
    ],
    ids=["json", "format", "fields", "role", "hash"],
)
def test_malformed_files_are_input_errors(tmp_path, content, reason):
    path = tmp_path / "tokens.json"
    path.write_text(content)
    with pytest.raises(InputError, match=reason):
        load_tokens(path)


def test_a_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="tokens.json"):
        load_tokens(tmp_path / "tokens.json")


def test_revoke_removes_only_the_named_token(tmp_path):
    path = tmp_path / "tokens.json"
    kept = add_token(path, "frontend", "reader")
    gone = add_token(path, "old-frontend", "admin")
    removed = revoke_token(path, "old-frontend")
    assert (removed.name, removed.role) == ("old-frontend", "admin")
    entries = load_tokens(path)
    assert [entry.name for entry in entries] == ["frontend"]
    assert check_token(entries, gone) is None and check_token(entries, kept) == ("frontend", "reader")
    assert stat.S_IMODE(path.stat().st_mode) == 0o600  # written as add_token writes
    with pytest.raises(ValueError, match="no token named 'old-frontend'"):
        revoke_token(path, "old-frontend")
    with pytest.raises(InputError, match="absent.json"):
        revoke_token(tmp_path / "absent.json", "frontend")


def test_token_revoke_command(tmp_path, capsys):
    path = tmp_path / "tokens.json"
    add_token(path, "frontend", "reader")
    assert main(["token", "revoke", "frontend", "--tokens", str(path)]) == 0
    assert "revoked" in capsys.readouterr().out and load_tokens(path) == ()
    # an unknown name: exit status 2 and one line (the CLI's one error mapping)
    assert main(["token", "revoke", "frontend", "--tokens", str(path)]) == 2
    error = capsys.readouterr().err
    assert error.count("\n") == 1 and "no token named 'frontend'" in error
    assert main(["token", "revoke", "x" * 300, "--tokens", str(path)]) == 2
    assert "x" * 65 not in capsys.readouterr().err  # a long bad name is not echoed


# -- viewer keys and assertions --------------------------------------------------------------------
NOW = 1_800_000_000


def _rfc2104_hmac_sha256(key: bytes, message: bytes) -> bytes:
    """HMAC written out as RFC 2104 section 2 defines it (B = 64 for SHA-256), not through ``hmac``."""
    key = key.ljust(64, b"\0")
    inner = hashlib.sha256(bytes(k ^ 0x36 for k in key) + message).digest()
    return hashlib.sha256(bytes(k ^ 0x5C for k in key) + inner).digest()


def _b64url(raw: bytes) -> str:
    return base64.urlsafe_b64encode(raw).rstrip(b"=").decode()  # RFC 4648 section 5, no padding


def test_an_assertions_mac_is_hmac_sha256_of_the_documented_message():
    key = bytes(range(32))
    made = viewer_assertion(key, "wiki-frontend", "u00042", ttl=60, now=NOW)
    user, expiry, mac = made.split(".")
    assert (user, expiry) == ("u00042", str(NOW + 60))
    message = b"rankrec-viewer-v1\nwiki-frontend\n" + str(NOW + 60).encode() + b"\nu00042"
    assert mac == _b64url(_rfc2104_hmac_sha256(key, message))


@pytest.mark.parametrize("user", ["u00042", "ops.team.lead", "ünïcode/页 with space", "per%cent", "a.b.c"])
def test_assertions_round_trip_any_valid_user_id(user):
    key = bytes(range(32))
    made = viewer_assertion(key, "frontend", user, ttl=30, now=NOW)
    assert made.isascii()  # a header value: the user travels percent-encoded (RFC 3986 section 2.1)
    assert check_viewer_assertion(key, "frontend", made, now=NOW + 29) == user


def _tampered(made: str) -> dict[str, str]:
    user, expiry, mac = made.split(".")
    flipped = mac[:-1] + ("A" if mac[-1] != "A" else "B")
    return {
        "other user": f"u00043.{expiry}.{mac}",
        "later expiry": f"{user}.{int(expiry) + 10}.{mac}",
        "other mac": f"{user}.{expiry}.{flipped}",
        "no mac": f"{user}.{expiry}.",
        "two fields": f"{user}.{expiry}",
        "unicode digits": f"{user}.{'١' * 10}.{mac}",
        "huge": "u" * 300_000 + f".{expiry}.{mac}",
        "bad escape": f"%ff%fe.{expiry}.{mac}",
    }


def test_a_changed_assertion_is_refused_without_being_quoted():
    key = bytes(range(32))
    made = viewer_assertion(key, "frontend", "u00042", ttl=60, now=NOW)
    for name, value in _tampered(made).items():
        with pytest.raises(ValueError) as refused:
            check_viewer_assertion(key, "frontend", value, now=NOW)
        assert "u00042" not in str(refused.value) and "uuuu" not in str(refused.value), name
    with pytest.raises(ValueError, match="MAC"):  # bound to the token it travels with
        check_viewer_assertion(key, "other-frontend", made, now=NOW)
    with pytest.raises(ValueError, match="MAC"):  # and to the key
        check_viewer_assertion(bytes(32), "frontend", made, now=NOW)


def test_an_assertion_is_valid_only_until_it_expires_and_only_if_it_expires_soon():
    key = bytes(range(32))
    made = viewer_assertion(key, "frontend", "u00042", ttl=60, now=NOW)
    assert check_viewer_assertion(key, "frontend", made, now=NOW + 59.9) == "u00042"
    with pytest.raises(ValueError, match="expired"):
        check_viewer_assertion(key, "frontend", made, now=NOW + 60)
    long_lived = viewer_assertion(key, "frontend", "u00042", ttl=3600, now=NOW)
    with pytest.raises(ValueError, match="300 s ahead"):  # the front end cannot mint long-lived ones
        check_viewer_assertion(key, "frontend", long_lived, max_ttl=300, now=NOW)


def test_macs_are_compared_in_constant_time(monkeypatch):
    # common practice (and the hmac module's advice): compare MACs with hmac.compare_digest
    compared = []
    original = hmac.compare_digest

    def recording(a, b):
        compared.append((a, b))
        return original(a, b)

    monkeypatch.setattr("rankrec.tokens.hmac.compare_digest", recording)
    key = bytes(range(32))
    made = viewer_assertion(key, "frontend", "u00042", now=NOW)
    check_viewer_assertion(key, "frontend", made, now=NOW)
    assert (made.split(".")[-1], made.split(".")[-1]) in compared


def test_bad_users_keys_and_ttls_are_refused_when_making_assertions():
    key = bytes(range(32))
    for user in ("", "a\nb", "x" * 257):
        with pytest.raises(ValueError, match="user"):
            viewer_assertion(key, "frontend", user)
    with pytest.raises(ValueError, match="key"):
        viewer_assertion(b"short", "frontend", "u00042")
    with pytest.raises(ValueError, match="ttl"):
        viewer_assertion(key, "frontend", "u00042", ttl=0)
    with pytest.raises(ValueError, match="token_name"):
        viewer_assertion(key, "has space", "u00042")


def test_a_viewer_key_is_random_kept_in_the_private_file_and_replaced_on_request(tmp_path):
    path = tmp_path / "tokens.json"
    token = add_token(path, "frontend", "reader")
    add_token(path, "ops", "admin")
    first = add_viewer_key(path, "frontend")
    entries = {entry.name: entry for entry in load_tokens(path)}
    assert entries["frontend"].viewer_key == first and entries["ops"].viewer_key is None
    assert len(base64.urlsafe_b64decode(first + "=")) == 32  # 256 random bits (secrets.token_urlsafe)
    assert first not in repr(entries["frontend"])  # never printed by accident
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert check_token(load_tokens(path), token) == ("frontend", "reader")  # the token still works
    second = add_viewer_key(path, "frontend")
    assert second != first and viewer_key_of(path, "frontend") == second
    with pytest.raises(ValueError, match="no viewer key"):
        viewer_key_of(path, "ops")
    with pytest.raises(ValueError, match="no token named"):
        add_viewer_key(path, "nobody")


def test_a_malformed_viewer_key_in_the_file_is_an_input_error(tmp_path):
    path = tmp_path / "tokens.json"
    entry = {"name": "a", "role": "reader", "sha256": "0" * 64, "created": "", "viewer_key": "short"}
    path.write_text(json.dumps({"format": 1, "tokens": [entry]}))
    with pytest.raises(InputError, match="viewer_key"):
        load_tokens(path)


def test_token_add_with_a_viewer_key_and_token_assert(tmp_path, capsys):
    path = tmp_path / "tokens.json"
    assert main(["token", "add", "frontend", "--role", "reader", "--viewer-key", "--tokens", str(path)]) == 0
    token, key = capsys.readouterr().out.split()
    assert check_token(load_tokens(path), token) == ("frontend", "reader")
    assert viewer_key_of(path, "frontend") == key
    assert main(["token", "assert", "frontend", "u00042", "--tokens", str(path), "--ttl", "30"]) == 0
    made = capsys.readouterr().out.strip()
    assert check_viewer_assertion(key, "frontend", made) == "u00042"
    assert main(["token", "add", "plain", "--role", "reader", "--tokens", str(path)]) == 0
    assert len(capsys.readouterr().out.split()) == 1  # without --viewer-key: the token only
    assert main(["token", "assert", "plain", "u00042", "--tokens", str(path)]) == 2
    assert "no viewer key" in capsys.readouterr().err
    assert main(["token", "assert", "frontend", "u" * 300_000, "--tokens", str(path)]) == 2
    assert len(capsys.readouterr().err) < 300  # a huge id is not echoed
