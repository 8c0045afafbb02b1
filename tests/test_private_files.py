"""Files holding tenants' data are 0600, directories the service makes for them 0700.

Sources: POSIX open(2) and umask(2) (a created file's mode is the requested mode less the umask);
SQLite's documentation of its unix VFS (the -wal and -shm files take the database file's
permissions); ``stat.S_IMODE`` as the oracle of a file's permission bits.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Iterator
from pathlib import Path

import pytest
from kombu import Connection

from workers.private_files import private_directory, private_file
from workers.store import NewCheck, open_stores


@pytest.fixture
def usual_umask() -> Iterator[None]:
    """The common umask 022, under which files are created 0644 unless asked otherwise."""
    previous = os.umask(0o022)
    try:
        yield
    finally:
        os.umask(previous)


def mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def test_the_sqlite_store_and_its_journal_files_are_0600(tmp_path, usual_umask):
    path = tmp_path / "data" / "store.sqlite3"
    stores = open_stores(f"sqlite:///{path}")
    stores.checks.create_checks("acme", [NewCheck(b"x" * 100, "json", "a")])
    assert stores.checks.list_batches("acme") == []  # read after the write: WAL in use
    companions = [Path(f"{path}{s}") for s in ("-wal", "-shm")]
    assert all(p.exists() for p in companions)
    assert [mode(p) for p in (path, *companions)] == [0o600] * 3
    stores.close()
    # what umask 022 gives a file nobody asked to protect: the oracle of the test's premise
    (tmp_path / "plain").write_text("x")
    assert mode(tmp_path / "plain") == 0o644


def test_a_store_left_readable_by_an_earlier_version_is_tightened(tmp_path, usual_umask):
    path = tmp_path / "store.sqlite3"
    open_stores(str(path)).close()
    for file in (path, Path(f"{path}-wal")):
        if file.exists():
            os.chmod(file, 0o644)
    open_stores(str(path)).close()
    assert mode(path) == 0o600
    wal = Path(f"{path}-wal")
    assert not wal.exists() or mode(wal) == 0o600


def test_the_embedded_broker_file_is_0600(tmp_path, usual_umask):
    path = tmp_path / "broker.sqlite3"
    with Connection(f"sqlite:///{path}",
                    transport="workers.sqlite_transport:Transport") as connection:
        queue = connection.SimpleQueue("ballast.test")
        queue.put({"check_id": "chk_" + "A" * 22})
        assert queue.get(timeout=5).payload["check_id"].startswith("chk_")
        queue.close()
    assert mode(path) == 0o600


def test_private_helpers(tmp_path, usual_umask):
    folder = private_directory(tmp_path / "a" / "b")
    assert mode(folder) == 0o700 and mode(tmp_path / "a") == 0o755  # parents as usual
    existing = tmp_path / "mine"
    existing.mkdir(mode=0o755)
    private_directory(existing)
    assert mode(existing) == 0o755  # a directory the service did not make is left alone
    file = private_file(folder / "log")
    assert mode(file) == 0o600 and file.read_bytes() == b""
    file.write_text("kept")
    assert private_file(file).read_text() == "kept"  # an existing file is not truncated


def test_serve_makes_its_data_directory_and_logs_private(tmp_path, usual_umask, monkeypatch):
    """``ballast serve``'s own files: the data directory, its log files and the saved token."""
    from service import embedded

    monkeypatch.setenv("BALLAST_DATA_DIR", str(tmp_path / "var"))
    monkeypatch.delenv("BALLAST_REDIS_URL", raising=False)
    monkeypatch.delenv("BALLAST_TOKEN", raising=False)
    config = embedded.load_config()
    private_directory(config.data_dir)
    token = embedded.prepare_token(config)
    assert token.startswith("blst_")
    assert mode(config.data_dir) == 0o700
    assert mode(config.data_dir / embedded.TOKEN_FILE) == 0o600
    assert mode(config.data_dir / "store.sqlite3") == 0o600
    child = embedded.Child("probe", ["true"], dict(os.environ), config.data_dir / "logs" / "x.log")
    child.start()
    assert child.wait(10)
    assert mode(config.data_dir / "logs") == 0o700 and mode(child.log_path) == 0o600
