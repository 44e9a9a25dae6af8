"""Where an archive lives: a local folder or a prefix in an S3-compatible object store.

An archive root is either a local folder (``./outrigger-data``) or a URI
``s3://BUCKET/PREFIX``. A :class:`Location` is one place under such a root,
read and written through pyarrow's filesystem layer, with the few operations the
archive needs (``/``, read, write whole, list, delete, a change stamp). The
local archive keeps its own ``pathlib`` code; the fleet tables, course marks and
chart overviews use a :class:`Location` so that they work on both.

Object-store connection settings come from the standard AWS variables:
``AWS_ACCESS_KEY_ID`` / ``AWS_SECRET_ACCESS_KEY`` (or any other source of the AWS
SDK's default credential chain), ``AWS_ENDPOINT_URL`` (or ``AWS_ENDPOINT_URL_S3``)
for an S3-compatible server other than AWS, and ``AWS_REGION`` /
``AWS_DEFAULT_REGION``.
"""

from __future__ import annotations

import hashlib
import os
import secrets
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import IO, Any, cast
from urllib.parse import urlsplit

import pyarrow as pa
import pyarrow.fs as pafs
import pyarrow.parquet as pq

from analysis.errors import ArchiveError

S3_PREFIX = "s3://"
#: Objects up to this size get a content hash in their change stamp (object
#: stores give modification times to the second only). [bytes]
HASHED_STAMP_BYTES = 256 * 1024


def is_uri(root: str | os.PathLike[str]) -> bool:
    """True when ``root`` names an object-store archive (``s3://...``)."""
    return isinstance(root, str) and root.startswith(S3_PREFIX)


def s3_filesystem() -> pafs.S3FileSystem:
    """An S3 filesystem configured from the standard AWS environment variables."""
    kwargs: dict[str, Any] = {
        "connect_timeout": 10.0,
        "request_timeout": 60.0,
        "retry_strategy": pafs.AwsStandardS3RetryStrategy(max_attempts=3),
    }
    endpoint = os.environ.get("AWS_ENDPOINT_URL_S3") or os.environ.get("AWS_ENDPOINT_URL")
    if endpoint:
        parts = urlsplit(endpoint if "://" in endpoint else f"https://{endpoint}")
        if not parts.netloc:
            raise ArchiveError(
                f"AWS_ENDPOINT_URL must be a URL such as http://127.0.0.1:9000, found {endpoint!r}."
            )
        kwargs["endpoint_override"] = parts.netloc
        kwargs["scheme"] = parts.scheme or "https"
    region = os.environ.get("AWS_REGION") or os.environ.get("AWS_DEFAULT_REGION")
    if region:
        kwargs["region"] = region
    return pafs.S3FileSystem(**kwargs)


@dataclass(frozen=True)
class Location:
    """A file or folder on a pyarrow filesystem.

    Attributes
    ----------
    fs : pyarrow.fs.FileSystem
        The filesystem (local or S3).
    path : str
        The path in that filesystem (``bucket/prefix/...`` on S3), no trailing ``/``.
    local : bool
        True for the local filesystem (renames are atomic there).
    """

    fs: pafs.FileSystem
    path: str
    local: bool

    # --- building ------------------------------------------------------------------

    @classmethod
    def of(cls, root: str | os.PathLike[str] | Location) -> Location:
        """The location of an archive root given as a folder, a URI or a Location."""
        if isinstance(root, Location):
            return root
        if is_uri(root):
            text = str(root)[len(S3_PREFIX) :].strip("/")
            if not text or text.split("/", 1)[0] in ("", ".", ".."):
                raise ArchiveError(
                    f"An object-store archive needs a bucket: s3://BUCKET/PREFIX, found {root!r}."
                )
            return cls(s3_filesystem(), text, False)
        return cls(pafs.LocalFileSystem(), str(Path(root).resolve()), True)

    def __truediv__(self, part: str) -> Location:
        part = str(part).strip("/")
        if not part or any(p in ("", ".", "..") for p in part.split("/")):
            raise ArchiveError(f"{part!r} is not a file name inside the archive.")
        return Location(self.fs, f"{self.path}/{part}", self.local)

    @property
    def name(self) -> str:
        return self.path.rsplit("/", 1)[-1]

    @property
    def parent(self) -> Location:
        return Location(self.fs, self.path.rsplit("/", 1)[0], self.local)

    @property
    def uri(self) -> str:
        """How a person names this place: a local path or ``s3://bucket/key``."""
        return self.path if self.local else f"{S3_PREFIX}{self.path}"

    def __str__(self) -> str:
        return self.uri

    def relative_to(self, other: Location) -> PurePosixPath:
        """This place's path below ``other``."""
        return PurePosixPath(self.path).relative_to(other.path)

    # --- reading ---------------------------------------------------------------------

    def info(self) -> pafs.FileInfo:
        try:
            return self.fs.get_file_info(self.path)
        except OSError as exc:
            raise ArchiveError(f"{self.uri} cannot be reached ({exc}).") from exc

    def is_file(self) -> bool:
        return bool(self.info().type == pafs.FileType.File)

    def exists(self) -> bool:
        return bool(self.info().type != pafs.FileType.NotFound)

    def read_bytes(self) -> bytes:
        with self.fs.open_input_stream(self.path) as f:
            return cast(bytes, f.read())

    def read_text(self, encoding: str = "utf-8") -> str:
        return self.read_bytes().decode(encoding)

    def open(self, mode: str = "rb") -> IO[bytes]:
        """A binary file object for reading (``rb``) or writing (``wb``)."""
        if mode == "rb":
            return cast(IO[bytes], self.fs.open_input_file(self.path))
        if mode == "wb":
            return cast(IO[bytes], self.fs.open_output_stream(self.path))
        raise ValueError(f"mode must be 'rb' or 'wb', found {mode!r}")

    def stamp(self) -> tuple[Any, ...] | None:
        """What changes when the file is replaced; None when there is no file.

        Local: (inode, size, modification time [ns]). Object store: (size,
        modification time [ns]) and, for small objects, a hash of the content,
        since object stores keep times to the second only.
        """
        if self.local:
            try:
                st = os.stat(self.path)
            except OSError:
                return None
            return (st.st_ino, st.st_size, st.st_mtime_ns)
        try:
            info = self.fs.get_file_info(self.path)
        except OSError:
            return None
        if info.type != pafs.FileType.File:
            return None
        stamp: tuple[Any, ...] = (info.size, info.mtime_ns)
        if info.size is not None and info.size <= HASHED_STAMP_BYTES:
            try:
                stamp += (hashlib.sha256(self.read_bytes()).hexdigest()[:16],)
            except OSError:
                return None
        return stamp

    def listdir(self) -> list[pafs.FileInfo]:
        """Entries right below this folder (none if it does not exist)."""
        try:
            return list(self.fs.get_file_info(pafs.FileSelector(self.path, allow_not_found=True)))
        except OSError as exc:
            raise ArchiveError(f"{self.uri} cannot be listed ({exc}).") from exc

    def walk(self) -> Iterator[pafs.FileInfo]:
        """Every file below this folder."""
        try:
            infos = self.fs.get_file_info(
                pafs.FileSelector(self.path, allow_not_found=True, recursive=True)
            )
        except OSError as exc:
            raise ArchiveError(f"{self.uri} cannot be listed ({exc}).") from exc
        return (i for i in infos if i.type == pafs.FileType.File)

    def read_parquet(self, **kwargs: Any) -> pa.Table:
        return pq.read_table(self.path, filesystem=self.fs, **kwargs)

    def read_schema(self) -> pa.Schema:
        return pq.read_schema(self.path, filesystem=self.fs)

    # --- writing ---------------------------------------------------------------------

    def mkdir(self) -> None:
        """Create the folder (a no-op on an object store, which has no folders)."""
        if self.local:
            self.fs.create_dir(self.path, recursive=True)

    def write_bytes(self, data: bytes) -> None:
        """Replace the file whole: a temporary file renamed locally, one upload on S3.

        An object-store upload becomes visible only when complete, so readers
        see the old object or the new one, never a part.
        """
        if self.local:
            self.parent.mkdir()
            tmp = f"{self.parent.path}/.{self.name}.{secrets.token_hex(4)}.tmp"
            try:
                with open(tmp, "wb") as f:
                    f.write(data)
                os.replace(tmp, self.path)
            finally:
                if os.path.exists(tmp):
                    os.unlink(tmp)
            return
        with self.fs.open_output_stream(self.path) as f:
            f.write(data)

    def write_text(self, text: str, encoding: str = "utf-8") -> None:
        self.write_bytes(text.encode(encoding))

    def write_parquet(self, table: pa.Table) -> None:
        """Write a table as this Parquet file (zstd), replacing it whole."""
        if self.local:
            self.parent.mkdir()
            tmp = f"{self.parent.path}/.{self.name}.{secrets.token_hex(4)}.tmp"
            try:
                pq.write_table(table, tmp, compression="zstd")
                os.replace(tmp, self.path)
            finally:
                if os.path.exists(tmp):
                    os.unlink(tmp)
            return
        pq.write_table(table, self.path, filesystem=self.fs, compression="zstd")

    def upload(self, source: Path) -> None:
        """Copy a local file here, streamed in blocks (never whole in memory)."""
        if self.local:
            raise ArchiveError("upload() is for object-store locations")
        pafs.copy_files(
            str(source),
            self.path,
            source_filesystem=pafs.LocalFileSystem(),
            destination_filesystem=self.fs,
            chunk_size=8 * 1024 * 1024,
        )

    def unlink(self) -> None:
        """Remove the file; nothing if there is none."""
        try:
            self.fs.delete_file(self.path)
        except FileNotFoundError:
            pass
        except OSError:
            if self.exists():
                raise

    def rmtree(self) -> None:
        """Remove the folder and everything in it; nothing if there is none."""
        try:
            self.fs.delete_dir(self.path)
        except FileNotFoundError:
            pass
        except OSError:
            if self.exists():
                raise
