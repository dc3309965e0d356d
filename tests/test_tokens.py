"""The tokens file: only hashes stored, atomic writes with mode 0600, duplicate names refused, revocation."""

from __future__ import annotations

import hashlib
import json
import stat

import pytest

from rankrec.cli import main
from rankrec.errors import InputError
from rankrec.tokens import add_token, check_token, load_tokens, revoke_token


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
