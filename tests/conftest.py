"""Fixtures shared by every test folder: the loopback S3 server of the object-store tests."""

from tests.s3_server import s3_endpoint, s3_root

__all__ = ["s3_endpoint", "s3_root"]
