"""A real S3-compatible server for the object-store tests: moto in server mode on loopback.

The server runs in its own process (``python -m moto.server``, from the test
extra ``moto[server]``), bound to 127.0.0.1 on a free port, for the whole test
session; the archive talks to it over HTTP through pyarrow's S3 client, exactly
as it would to any other S3-compatible store. Stopped when the session ends.
"""

from __future__ import annotations

import os
import re
import secrets
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pyarrow.fs as pafs
import pytest

#: Credentials moto accepts (any); never real ones.
TEST_ENV = {
    "AWS_ACCESS_KEY_ID": "outrigger-test",
    "AWS_SECRET_ACCESS_KEY": "outrigger-test-secret",
    "AWS_REGION": "us-east-1",
}


def _start(log_path: Path) -> tuple[subprocess.Popen[bytes], str]:
    log = log_path.open("wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", "0"],
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        found = re.search(rb"Running on (http://127\.0\.0\.1:\d+)", log_path.read_bytes())
        if found:
            return proc, found.group(1).decode()
        if proc.poll() is not None:
            break
        time.sleep(0.1)
    proc.kill()
    raise RuntimeError(f"moto server did not start: {log_path.read_text(errors='replace')}")


@pytest.fixture(scope="session")
def s3_endpoint(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """URL of the session's S3 server; the AWS_* variables point at it meanwhile."""
    pytest.importorskip("moto", reason="test extra moto[server] is not installed")
    proc, url = _start(tmp_path_factory.mktemp("moto") / "moto.log")
    saved = {k: os.environ.get(k) for k in [*TEST_ENV, "AWS_ENDPOINT_URL"]}
    os.environ.update(TEST_ENV, AWS_ENDPOINT_URL=url)
    try:
        yield url
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def new_bucket(endpoint: str) -> str:
    """Create an empty bucket on the test server; return its name."""
    name = f"outrigger-{secrets.token_hex(4)}"
    host = endpoint.split("://", 1)[1]
    fs = pafs.S3FileSystem(
        endpoint_override=host,
        scheme="http",
        region=TEST_ENV["AWS_REGION"],
        access_key=TEST_ENV["AWS_ACCESS_KEY_ID"],
        secret_key=TEST_ENV["AWS_SECRET_ACCESS_KEY"],
        allow_bucket_creation=True,
    )
    fs.create_dir(name)
    return name


@pytest.fixture
def s3_root(s3_endpoint: str) -> str:
    """A fresh archive URI ``s3://<new bucket>/archive`` for one test."""
    return f"s3://{new_bucket(s3_endpoint)}/archive"
