"""``chirpcast keys add`` and the start-up checks of ``chirpcast serve``."""

from __future__ import annotations

from pathlib import Path

import pytest

from estimator.errors import InputError
from service.cli import main
from service.serve import is_loopback, lock_data_dir
from service.storage import Store


def test_keys_add_prints_key_once_and_stores_hash(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    data = tmp_path / "data"
    assert main(["keys", "add", "alert-pipeline", "--data-dir", str(data)]) == 0
    out = capsys.readouterr()
    key = out.out.strip()
    assert len(key) >= 40
    assert "shown only now" in out.err
    store = Store(data)
    assert store.key_name(key) == "alert-pipeline"
    assert store.key_name(key + "x") is None
    assert key.encode() not in (data / "chirpcast.sqlite3").read_bytes()


def test_serve_refuses_public_host_without_keys(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code = main(["serve", "--host", "0.0.0.0", "--data-dir", str(tmp_path / "d")])
    assert code == 2
    err = capsys.readouterr().err
    assert "refusing to listen on 0.0.0.0" in err
    assert "chirpcast keys add" in err


def test_bad_flag_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["serve", "--workers", "0", "--data-dir", str(tmp_path / "d")])
    assert code == 2
    assert "workers" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("host", "loopback"),
    [("127.0.0.1", True), ("127.1.2.3", True), ("::1", True), ("localhost", True),
     ("0.0.0.0", False), ("192.168.1.5", False), ("::", False), ("example.org", False)],
)
def test_loopback(host: str, loopback: bool) -> None:
    # 127.0.0.0/8 and ::1 are loopback by RFC 1122 section 3.2.1.3 and RFC 4291 section 2.5.3
    assert is_loopback(host) is loopback


def test_one_server_per_data_folder(tmp_path: Path) -> None:
    first = lock_data_dir(tmp_path)
    try:
        with pytest.raises(InputError, match="another chirpcast server"):
            lock_data_dir(tmp_path)
    finally:
        first.close()
    lock_data_dir(tmp_path).close()
