"""Hostile quarters for ``levgap import-sec``: exit 2 with one line, bounded memory.

Every zip is built in tmp_path at test time (nothing large is committed). The command runs
in a child process, as a user would run it, so that a crash (a traceback, "Fatal Python
error", an abort) would show, and so that its peak resident memory (VmHWM, the child's own
high-water mark, as benchmark/peak_memory.py reads it) is measured.
"""

from __future__ import annotations

import json
import os
import struct
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from levgap.errors import SchemaError
from levgap.ingest.sec import import_sec
from levgap.ingest.sec_files import ReadLimits, locate_quarter, read_filtered

FIXTURE = Path(__file__).parent / "fixtures" / "sec" / "current"
NUM_HEADER = b"adsh\ttag\tversion\tddate\tqtrs\tuom\tsegments\tcoreg\tvalue\tfootnote\n"
MB = 1 << 20

# The child runs the command line and reports its exit code, its stderr and its own peak
# resident memory; it never raises (a crash shows as a non-zero code from Python itself).
_CHILD = r"""
import contextlib, io, json, sys
from levgap.cli import main
sys.argv = ["levgap", "import-sec", *sys.argv[1:]]
err = io.StringIO()
code = 0
with contextlib.redirect_stderr(err):
    try:
        main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else 1
hwm = 0.0
with open("/proc/self/status") as fh:
    for line in fh:
        if line.startswith("VmHWM:"):
            hwm = float(line.split()[1]) / 1024
print(json.dumps({"code": code, "stderr": err.getvalue(), "hwm_mb": hwm}))
"""


def _run(*args: str) -> dict:
    proc = subprocess.run([sys.executable, "-c", _CHILD, *args], capture_output=True,
                          text=True, timeout=300, check=False,
                          env={**os.environ, "PYTHONFAULTHANDLER": "1"})
    assert proc.returncode == 0, proc.stderr[-2000:]  # the child itself never crashed
    assert "Traceback" not in proc.stderr and "Fatal Python error" not in proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _one_line_exit_2(result: dict, *patterns: str) -> None:
    assert result["code"] == 2, result
    lines = [ln for ln in result["stderr"].strip().splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("levgap: error:"), result["stderr"]
    assert "Traceback" not in result["stderr"]
    for p in patterns:
        assert p in lines[0], lines[0]


def _zip(path: Path, members: dict[str, bytes], method: int = zipfile.ZIP_DEFLATED) -> Path:
    with zipfile.ZipFile(path, "w", method) as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return path


def _quarter(tmp_path: Path, name: str = "q.zip", **replace: bytes) -> Path:
    members = {n: (FIXTURE / n).read_bytes() for n in ("sub.txt", "num.txt", "pre.txt")}
    members.update({k.replace("_", "."): v for k, v in replace.items()})
    return _zip(tmp_path / name, members)


def _stream_zip(path: Path, name: str, head: bytes, chunk: bytes, total: int,
                others: dict[str, bytes]) -> Path:
    """A zip whose member ``name`` is ``head`` then ``chunk`` repeated to ``total`` bytes."""
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED, compresslevel=9) as zf:
        for n, data in others.items():
            zf.writestr(n, data)
        with zf.open(name, "w", force_zip64=True) as fh:
            fh.write(head)
            written = len(head)
            block = chunk * max(1, MB // len(chunk))
            while written < total:
                fh.write(block)
                written += len(block)
    return path


def test_binary_garbage_num_txt(tmp_path: Path) -> None:
    garbage = NUM_HEADER + os.urandom(3 * MB)
    out = _run(str(_quarter(tmp_path, num_txt=garbage)), "--out", str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "num.txt", "tab-delimited text of the SEC data sets")
    assert not (tmp_path / "p.csv").exists()


def test_garbage_sub_txt(tmp_path: Path) -> None:
    header = (FIXTURE / "sub.txt").read_bytes().splitlines(keepends=True)[0]
    out = _run(str(_quarter(tmp_path, sub_txt=header + os.urandom(2 * MB))), "--out",
               str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "sub.txt")
    out = _run(str(_quarter(tmp_path, "r.zip", sub_txt=os.urandom(MB))), "--out",
               str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "sub.txt")


def _patch_members(path: Path, local: dict[int, bytes], central: dict[int, bytes]) -> None:
    """Overwrite fields of every local header and central directory entry of a zip."""
    data = bytearray(path.read_bytes())
    for sig, fields in ((b"PK\x03\x04", local), (b"PK\x01\x02", central)):
        at = data.find(sig)
        while at >= 0:
            for offset, value in fields.items():
                data[at + offset: at + offset + len(value)] = value
            at = data.find(sig, at + 4)
    path.write_bytes(bytes(data))


def test_unsupported_compression_encryption_and_corrupt_members(tmp_path: Path) -> None:
    # Deflate64 (method 9): zipfile cannot decompress it. The method field sits at offset 8
    # of a local header and 10 of a central directory entry (PKWARE APPNOTE, section 4.3).
    deflate64 = _quarter(tmp_path, "d64.zip")
    _patch_members(deflate64, {8: struct.pack("<H", 9)}, {10: struct.pack("<H", 9)})
    _one_line_exit_2(_run(str(deflate64), "--out", str(tmp_path / "p.csv")),
                     "unsupported compression method")
    # Encrypted: bit 0 of the general-purpose flags (offset 6 / 8).
    locked = _quarter(tmp_path, "enc.zip")
    _patch_members(locked, {6: struct.pack("<H", 1)}, {8: struct.pack("<H", 1)})
    _one_line_exit_2(_run(str(locked), "--out", str(tmp_path / "p.csv")), "encrypted")
    # A corrupt member: stored data with one byte changed fails its CRC-32 at the end.
    members = {n: (FIXTURE / n).read_bytes() for n in ("sub.txt", "num.txt")}
    bad = _zip(tmp_path / "crc.zip", members, zipfile.ZIP_STORED)
    data = bytearray(bad.read_bytes())
    at = data.find(b"Assets\tus-gaap/2020\t20191231")
    data[at] = ord("B")
    bad.write_bytes(bytes(data))
    _one_line_exit_2(_run(str(bad), "--out", str(tmp_path / "p.csv")), "corrupt member",
                     "num.txt")


@pytest.mark.slow
def test_a_400_mb_line_without_line_end_in_a_small_zip(tmp_path: Path) -> None:
    zpath = _stream_zip(tmp_path / "long.zip", "num.txt", NUM_HEADER, b"x" * 4096, 400 * MB,
                        {"sub.txt": (FIXTURE / "sub.txt").read_bytes()})
    assert zpath.stat().st_size < 2 * MB  # a small zip that expands to 400 MB
    out = _run(str(zpath), "--out", str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "num.txt", "a row longer than")
    assert out["hwm_mb"] < 1024, out


@pytest.mark.slow
def test_400_mb_of_one_repeated_fact_stops_at_the_per_filing_limit(tmp_path: Path) -> None:
    row = b"0009100001-21-000010\tAssets\tus-gaap/2020\t20201231\t0\tUSD\t\t\t1.0000\t\n"
    zpath = _stream_zip(tmp_path / "rep.zip", "num.txt", NUM_HEADER, row, 400 * MB,
                        {"sub.txt": (FIXTURE / "sub.txt").read_bytes()})
    assert zpath.stat().st_size < 2 * MB
    out = _run(str(zpath), "--out", str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "num.txt", "rows of interest for one submission")
    assert out["hwm_mb"] < 1024, out


@pytest.mark.slow
def test_400_mb_of_annual_reports_in_sub_txt_stops_at_the_submission_limit(
    tmp_path: Path,
) -> None:
    lines = (FIXTURE / "sub.txt").read_bytes().splitlines(keepends=True)
    zpath = _stream_zip(tmp_path / "subs.zip", "sub.txt", lines[0], lines[1], 400 * MB,
                        {"num.txt": (FIXTURE / "num.txt").read_bytes()})
    out = _run(str(zpath), "--out", str(tmp_path / "p.csv"))
    _one_line_exit_2(out, "sub.txt", "rows of interest")
    assert out["hwm_mb"] < 1024, out


def test_limits_stop_reads_with_one_line_naming_the_file(tmp_path: Path) -> None:
    q = _quarter(tmp_path)
    small = ReadLimits(member_bytes={"sub": 500, "num": 1 << 30, "pre": 1 << 30, "tag": 1 << 30})
    with pytest.raises(SchemaError, match=r"q.zip:sub.txt must be at most 500 bytes"):
        import_sec([q], limits=small)
    with pytest.raises(SchemaError, match=r"header line of at most 20 bytes"):
        locate_quarter(q, ReadLimits(header_bytes=20))
    few = ReadLimits(rows_per_submission=3)
    with pytest.raises(SchemaError, match=r"at most 3 rows of interest for one submission"):
        import_sec([q], limits=few)
    with pytest.raises(SchemaError, match=r"at most 2 rows of interest"):
        read_filtered(locate_quarter(q), "sub", ("adsh",), max_rows=2)
    ok = import_sec([q], limits=ReadLimits(malformed_rows=0))
    assert len(ok.panel)  # no malformed row in the fixture: a zero allowance is enough


def test_malformed_rows_past_the_limit_are_refused(tmp_path: Path) -> None:
    text = (FIXTURE / "num.txt").read_bytes() + b"broken\trow\n" * 5
    q = _quarter(tmp_path, num_txt=text)
    assert any("5 rows with a wrong number of fields" in w for w in import_sec([q]).warnings)
    with pytest.raises(SchemaError, match="num.txt must be tab-delimited text"):
        import_sec([q], limits=ReadLimits(malformed_rows=4))
