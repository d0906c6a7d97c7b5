"""The real-clip fetch script (scripts/fetch_clips.py) on packages built here, offline."""

from __future__ import annotations

import gzip
import hashlib
import io
import tarfile

import pytest

from .real.conftest import fetch_clips


def _ar(members: list[tuple[str, bytes]]) -> bytes:
    """A Unix ar archive (the .deb container) holding ``members``."""
    out = [b"!<arch>\n"]
    for name, data in members:
        header = (f"{name + '/':<16}{0:<12}{0:<6}{0:<6}{100644:<8}{len(data):<10}").encode()
        out += [header + b"`\n", data, b"\n" if len(data) % 2 else b""]
    return b"".join(out)


def _tar_xz(files: dict[str, bytes]) -> bytes:
    buf = io.BytesIO()
    with tarfile.open(fileobj=buf, mode="w:xz") as tar:
        for name, data in files.items():
            info = tarfile.TarInfo(name)
            info.size = len(data)
            tar.addfile(info, io.BytesIO(data))
    return buf.getvalue()


def _deb(tmp_path, files: dict[str, bytes]):
    deb = tmp_path / "pkg_1.0_all.deb"
    deb.write_bytes(_ar([("debian-binary", b"2.0\n"),
                         ("control.tar.xz", _tar_xz({"./control": b"Package: pkg\n"})),
                         ("data.tar.xz", _tar_xz(files))]))
    return deb


def test_deb_members_are_read_without_dpkg(tmp_path):
    fc = fetch_clips()
    clip = bytes(range(256)) * 41  # odd-length members exercise the ar padding
    deb = _deb(tmp_path, {"./usr/share/doc/pkg/a.avi": clip[:-1],
                          "./usr/share/doc/pkg/b.mp4.gz": gzip.compress(clip),
                          "./usr/share/doc/pkg/other": b"x"})
    got = fc._deb_files(deb, {"usr/share/doc/pkg/a.avi", "usr/share/doc/pkg/b.mp4.gz"})
    assert got["usr/share/doc/pkg/a.avi"] == clip[:-1]
    assert gzip.decompress(got["usr/share/doc/pkg/b.mp4.gz"]) == clip
    assert set(got) == {"usr/share/doc/pkg/a.avi", "usr/share/doc/pkg/b.mp4.gz"}


def test_not_a_deb_is_one_plain_error(tmp_path):
    fc = fetch_clips()
    bad = tmp_path / "bad.deb"
    bad.write_bytes(b"PK\x03\x04 not an ar archive")
    with pytest.raises(fc.FetchError, match="not an ar archive"):
        fc._deb_files(bad, {"x"})


@pytest.fixture
def fake_registry(monkeypatch):
    """A manifest of two clips from one fake package; returns the count of downloads."""
    fc = fetch_clips()
    data = {"d/one.avi": b"first clip", "d/two.mp4.gz": gzip.compress(b"second clip")}
    sha = {"one.avi": hashlib.sha256(b"first clip").hexdigest(),
           "two.mp4": hashlib.sha256(b"second clip").hexdigest()}
    source = fc.Source("fake", "debian", "fake-pkg", "1.0")
    clips = tuple(fc.Clip(name, "fake", member, sha[name], "test licence", "test clip")
                  for name, member in (("one.avi", "d/one.avi"), ("two.mp4", "d/two.mp4.gz")))
    downloads = []

    def package_files(src, wanted, workdir):
        downloads.append(sorted(wanted))
        return {m: data[m] for m in wanted}

    monkeypatch.setattr(fc, "SOURCES", (source,))
    monkeypatch.setattr(fc, "CLIPS", clips)
    monkeypatch.setattr(fc, "RECORDS", ())
    monkeypatch.setattr(fc, "_package_files", package_files)
    return fc, data, downloads


def test_fetch_is_idempotent_and_gunzips(tmp_path, fake_registry):
    fc, _, downloads = fake_registry
    assert sorted(fc.fetch(tmp_path, log=lambda *_: None)) == ["one.avi", "two.mp4"]
    assert (tmp_path / "two.mp4").read_bytes() == b"second clip"
    assert fc.fetch(tmp_path, log=lambda *_: None) == []
    assert len(downloads) == 1
    (tmp_path / "one.avi").write_bytes(b"damaged")
    assert fc.fetch(tmp_path, log=lambda *_: None) == ["one.avi"]
    assert downloads[-1] == ["d/one.avi"]
    assert (tmp_path / "one.avi").read_bytes() == b"first clip"


def test_wrong_digest_is_refused_and_nothing_is_left(tmp_path, fake_registry, capsys):
    fc, data, _ = fake_registry
    data["d/one.avi"] = b"something else"
    assert fc.main(["--cache", str(tmp_path)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "sha256 mismatch" in err and "one.avi" in err
    assert not (tmp_path / "one.avi").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
