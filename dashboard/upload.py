"""A campaign uploaded from the browser: a zip of a manifest and its Touchstone files.

The zip is checked before and while it is extracted: size and file-count limits, no absolute
path, no ``..`` component, no symlink, no zip bomb (declared sizes and compression ratio, and the
bytes actually written). It goes into a fresh folder under the store's upload directory.
Every problem is an ``InputError`` with the same one-line form as the command line.
"""

from __future__ import annotations

import base64
import io
import os
import shutil
import stat
import uuid
import zipfile
from pathlib import Path, PurePosixPath

from ..errors import InputError

MAX_COMPRESSED_BYTES = 50 * 1024 ** 2
MAX_UNCOMPRESSED_BYTES = 200 * 1024 ** 2
MAX_FILES = 20000
MAX_RATIO = 200.0  # uncompressed / compressed per member above 1 MB (common practice for bomb checks)
CHUNK = 1 << 20


def decode_upload(contents: str, filename: str | None = None) -> bytes:
    """Bytes of a dcc.Upload ``contents`` string ("data:...;base64,...")."""
    if not contents or "," not in contents:
        raise InputError("the upload is empty", filename)
    head, data = contents.split(",", 1)
    if len(data) * 3 // 4 > MAX_COMPRESSED_BYTES:
        raise InputError(f"the upload is larger than {MAX_COMPRESSED_BYTES // 1024 ** 2} MB", filename)
    try:
        return base64.b64decode(data, validate=False)
    except (ValueError, TypeError):
        raise InputError("the upload is not valid base64 data", filename) from None


def _safe_member_path(name: str, label: str) -> PurePosixPath:
    if "\\" in name:
        name = name.replace("\\", "/")
    p = PurePosixPath(name)
    if p.is_absolute() or name.startswith("/") or (len(name) > 1 and name[1] == ":"):
        raise InputError(f"zip member {name!r} has an absolute path", label)
    if any(part == ".." for part in p.parts):
        raise InputError(f"zip member {name!r} escapes the upload folder (..)", label)
    return p


def safe_extract(data: bytes, dest: Path, label: str = "upload.zip") -> Path:
    """Extract a zip's bytes into ``dest`` (created, must not exist) under the limits above."""
    if len(data) > MAX_COMPRESSED_BYTES:
        raise InputError(f"the zip is larger than {MAX_COMPRESSED_BYTES // 1024 ** 2} MB", label)
    try:
        zf = zipfile.ZipFile(io.BytesIO(data))
    except zipfile.BadZipFile:
        raise InputError("not a zip file", label) from None
    with zf:
        infos = zf.infolist()
        if len(infos) > MAX_FILES:
            raise InputError(f"the zip holds {len(infos)} entries, more than the limit of {MAX_FILES}", label)
        declared = sum(i.file_size for i in infos)
        if declared > MAX_UNCOMPRESSED_BYTES:
            raise InputError(f"the zip would unpack to {declared / 1024 ** 2:.0f} MB, more than the limit of "
                             f"{MAX_UNCOMPRESSED_BYTES // 1024 ** 2} MB", label)
        for info in infos:
            _safe_member_path(info.filename, label)
            mode = info.external_attr >> 16
            if stat.S_ISLNK(mode):
                raise InputError(f"zip member {info.filename!r} is a symbolic link", label)
            if info.file_size > CHUNK and info.file_size > MAX_RATIO * max(info.compress_size, 1):
                raise InputError(f"zip member {info.filename!r} has a suspicious compression ratio "
                                 f"({info.file_size / max(info.compress_size, 1):.0f}:1)", label)
        dest.mkdir(parents=True, exist_ok=False)
        root = dest.resolve()
        written = 0
        try:
            for info in infos:
                rel = _safe_member_path(info.filename, label)
                target = (root / rel).resolve()
                if root != target and root not in target.parents:
                    raise InputError(f"zip member {info.filename!r} escapes the upload folder", label)
                if info.is_dir():
                    target.mkdir(parents=True, exist_ok=True)
                    continue
                target.parent.mkdir(parents=True, exist_ok=True)
                with zf.open(info) as src, open(target, "xb") as out:
                    while True:
                        chunk = src.read(CHUNK)
                        if not chunk:
                            break
                        written += len(chunk)
                        if written > MAX_UNCOMPRESSED_BYTES:
                            raise InputError(f"the zip unpacks to more than {MAX_UNCOMPRESSED_BYTES // 1024 ** 2} MB",
                                             label)
                        out.write(chunk)
        except InputError:
            shutil.rmtree(dest, ignore_errors=True)
            raise
        except (zipfile.BadZipFile, OSError, EOFError) as exc:
            shutil.rmtree(dest, ignore_errors=True)
            raise InputError(f"cannot unpack the zip: {exc}", label) from None
    return dest


def find_manifest(folder: Path, label: str = "upload.zip") -> Path:
    """The manifest.toml at the top of the upload, or in its single top-level folder."""
    direct = folder / "manifest.toml"
    if direct.is_file():
        return direct
    found = sorted(p for p in folder.glob("*/manifest.toml") if p.is_file())
    if len(found) == 1:
        return found[0]
    if not found:
        raise InputError("the zip holds no manifest.toml (at its top or in one top-level folder)", label)
    raise InputError(f"the zip holds {len(found)} manifests; upload one campaign at a time", label)


def _inside_upload(text: str, dest: Path, label: str) -> str:
    """``text`` with the server's paths of the upload folder shown as paths inside the zip (``label:...``)."""
    for root in sorted({str(dest.resolve()), str(dest), str(dest.absolute())}, key=len, reverse=True):
        text = text.replace(root + "/", label + ":").replace(root, label)
    for root in sorted({str(dest.parent.resolve()), str(dest.parent.absolute())}, key=len, reverse=True):
        text = text.replace(root, "[upload folder]")  # the server's folder of uploads, not shown either
    return text


def upload_error(exc: BaseException, dest: Path, label: str) -> InputError:
    """Any failure while reading an upload as one InputError line naming files inside the upload only."""
    if isinstance(exc, InputError):
        path = None if exc.path is None else _inside_upload(exc.path, dest, label)
        return InputError(_inside_upload(exc.message, dest, label), path, exc.line)
    text = " ".join(str(exc).split())[:300]
    return InputError(_inside_upload(f"cannot read the upload ({type(exc).__name__}{': ' + text if text else ''})",
                                     dest, label), label)


def upload_folder(manifest_path, upload_root) -> Path:
    """The folder an upload was extracted into, from the path of its manifest."""
    root = Path(upload_root)
    rel = Path(manifest_path).resolve().relative_to(root.resolve())
    return root / rel.parts[0]


def unpack_campaign(data: bytes, upload_root: Path, filename: str = "upload.zip"):
    """Extract into a fresh folder under ``upload_root`` and load the campaign (InputError on any problem).

    On any failure the folder is removed and the message names files inside the upload, never the
    server's paths. The campaign may ask for at most UPLOAD_TRANSFORM_SAMPLES of work (README, Dashboard).
    """
    from ..campaign import UPLOAD_TRANSFORM_SAMPLES, load_campaign

    label = Path(filename or "upload.zip").name
    if not label.lower().endswith(".zip"):
        raise InputError("upload a .zip of a manifest and its Touchstone files", label)
    dest = Path(upload_root) / uuid.uuid4().hex[:16]
    try:
        safe_extract(data, dest, label)
        campaign = load_campaign(find_manifest(dest, label), root=dest, max_samples=UPLOAD_TRANSFORM_SAMPLES)
    except BaseException as exc:
        shutil.rmtree(dest, ignore_errors=True)
        if isinstance(exc, Exception):
            raise upload_error(exc, dest, label) from None
        raise
    # warnings name files as they are inside the zip too, not by the upload folder
    campaign.warnings[:] = [w.replace(str(dest) + os.sep, label + ":") for w in campaign.warnings]
    return campaign
