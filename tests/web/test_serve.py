"""``exomap serve``: a real uvicorn server on a free loopback port, its options and the EXOMAP_ environment."""

from __future__ import annotations

import argparse
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from exomap.cli import serve
from web_scenarios import ADIABATIC

LAUNCH = "import sys; from exomap.cli import main; sys.exit(main())"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start(args: list[str], env: dict[str, str] | None = None) -> tuple[subprocess.Popen, str]:
    port = free_port()
    proc = subprocess.Popen(
        [sys.executable, "-c", LAUNCH, "serve", "--port", str(port), "--workers", "1", *args],
        env={**os.environ, **(env or {})},
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"exomap serve exited: {proc.stdout.read() if proc.stdout else ''}")
        try:
            if httpx.get(url + "/api/v1/health", timeout=1).status_code == 200:
                return proc, url
        except httpx.HTTPError:
            time.sleep(0.2)
    proc.kill()
    raise AssertionError("exomap serve did not answer within 90 s")


def stop(proc: subprocess.Popen) -> int:
    proc.send_signal(signal.SIGINT)
    try:
        return proc.wait(timeout=30)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()
        raise


@pytest.mark.slow
def test_serve_saves_and_a_restarted_server_loads(tmp_path: Path) -> None:
    data = tmp_path / "store"
    proc, url = start(["--data-dir", str(data)])
    try:
        saved = httpx.post(url + "/api/v1/scenarios", json=ADIABATIC, timeout=30)
        assert saved.status_code == 201, saved.text
        sid = saved.json()["id"]
        document = httpx.get(f"{url}/api/v1/scenarios/{sid}", timeout=30).text
        steady = httpx.get(f"{url}/api/v1/scenarios/{sid}/steady?residence_time=40 min", timeout=60)
        assert steady.status_code == 200, steady.text
        assert steady.json()["operating_point"]["residence_time_s"] == 2400.0  # analytic: 40 min = 2400 s
    finally:
        assert stop(proc) == 0
    assert (data / "scenarios.sqlite3").exists()

    # the same store named through the environment this time
    proc, url = start([], env={"EXOMAP_DATA_DIR": str(data)})
    try:
        again = httpx.get(f"{url}/api/v1/scenarios/{sid}", timeout=30)
        assert again.status_code == 200
        assert again.text == document
        assert httpx.post(url + "/api/v1/scenarios", json=ADIABATIC, timeout=30).status_code == 200
    finally:
        assert stop(proc) == 0


def test_options_override_the_environment(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("EXOMAP_PORT", "8100")
    monkeypatch.setenv("EXOMAP_DATA_DIR", str(tmp_path / "env"))
    parser = argparse.ArgumentParser()
    serve.add_parser(parser.add_subparsers())
    args = parser.parse_args(["serve", "--data-dir", str(tmp_path / "opt")])
    settings = serve.settings_from_args(args)
    assert settings.data_dir == tmp_path / "opt"
    assert settings.port == 8100
    assert settings.host == "127.0.0.1"


def test_bad_option_value_is_a_clear_error(capsys: pytest.CaptureFixture[str]) -> None:
    parser = argparse.ArgumentParser()
    serve.add_parser(parser.add_subparsers())
    args = parser.parse_args(["serve", "--port", "70000"])
    assert serve.run(args) == 2
    err = capsys.readouterr().err
    assert "port" in err and "Traceback" not in err
