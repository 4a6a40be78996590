"""Fuzz: a few hundred mutated image files made from the sample images, each run through ``ringgauge analyze``
in its own process under a memory limit. Every run must end cleanly: a documented exit status (never 70 —
internal error — nor a signal, nor a hang), at most one line on stderr (exactly one when it fails), no traceback.

Cost is bounded: the base images are small (160 x 120), the pixel budget is 4 megapixels, each case has 45 s
(a case takes about a second), and no new case starts after :data:`TIME_BUDGET_S`, so a busy machine runs fewer
of the 300 (about 140-200 at a load of 10 on 2 cores). Cases run in processes forked from a server that has
already imported ringgauge, so a case costs its own work only. The cases are seeded: a failure names its case number and
the mutated file is kept for replay.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[1]
SEED = 20261202
N_CASES = 300
TIME_BUDGET_S = 60.0
CASE_TIMEOUT_S = 45.0  # a case takes about a second; only a hang gets near this, even on a busy machine
MEMORY_LIMIT_MB = 2048
ALLOWED = {0, 2, 3, 5}  # success, unusable input, no trustworthy measurement, out of memory (see --help)
SOURCES = ["lot-FH2604/FH2604-01.png", "calibration/reference-disc-4mm.png", "testplate/PCC-51-A_frame1.png"]

# The fork server: reads one JSON request per line, forks a child per case (memory limit set in the child, as a
# preexec_fn would), runs the command line's main() there, and answers with the exit status and stderr.
SERVER = textwrap.dedent(r"""
    import json, os, resource, signal, sys, time
    import ringgauge.cli, ringgauge.commands.analyze, ringgauge.pipeline, ringgauge.report.text  # noqa: F401
    import cv2, numpy  # noqa: F401
    LIMIT = int(sys.argv[1]) << 20
    # warm up once (a whole analysis of a good small image), so every forked case finds the lazily imported
    # modules loaded and pays for its own work only
    _null = os.open(os.devnull, os.O_WRONLY)
    _saved = os.dup(1), os.dup(2)
    os.dup2(_null, 1)
    os.dup2(_null, 2)
    try:
        ringgauge.cli.main(["analyze", sys.argv[2], "--source", "sodium-d", "--pixel-size", "25", "--json"])
    finally:
        sys.stdout.flush()
        sys.stderr.flush()
        os.dup2(_saved[0], 1)
        os.dup2(_saved[1], 2)
    for line in sys.stdin:
        req = json.loads(line)
        err_path = req["stderr"]
        t0 = time.monotonic()
        pid = os.fork()
        if pid == 0:
            try:
                resource.setrlimit(resource.RLIMIT_AS, (LIMIT, LIMIT))
                fd = os.open(err_path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
                os.dup2(fd, 2)
                null = os.open(os.devnull, os.O_WRONLY)
                os.dup2(null, 1)
                sys.stderr = os.fdopen(2, "w", buffering=1)
                sys.stdout = os.fdopen(1, "w")
                try:
                    rc = ringgauge.cli.main(req["argv"])
                except SystemExit as exc:
                    rc = exc.code if isinstance(exc.code, int) else 2
                sys.stdout.flush()
                sys.stderr.flush()
                os._exit(rc if isinstance(rc, int) else 99)
            except BaseException:
                import traceback
                traceback.print_exc()
                sys.stderr.flush()
                os._exit(99)
        status = None
        while time.monotonic() - t0 < req["timeout"]:
            done, st = os.waitpid(pid, os.WNOHANG)
            if done:
                status = st
                break
            time.sleep(0.01)
        if status is None:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
            answer = {"timeout": True}
        elif os.WIFSIGNALED(status):
            answer = {"signal": os.WTERMSIG(status)}
        else:
            answer = {"rc": os.WEXITSTATUS(status)}
        answer["elapsed"] = time.monotonic() - t0
        print(json.dumps(answer), flush=True)
""")


def _bases(folder: Path) -> list[tuple[str, bytes]]:
    """Small images derived from the sample images, in every format ringgauge reads."""
    import cv2

    out = []
    for i, rel in enumerate(SOURCES):
        img = cv2.imread(str(REPO / "sample_images" / rel), cv2.IMREAD_UNCHANGED)
        small = cv2.resize(img, (160, 120), interpolation=cv2.INTER_AREA)
        wide = (small.astype(np.uint16) * 257)
        for ext, arr, params in [(".png", small, []), (".png", wide, []), (".tif", small, []), (".tif", wide, []),
                                 (".jpg", small, [cv2.IMWRITE_JPEG_QUALITY, 90]), (".bmp", small, []),
                                 (".pgm", small, [])]:
            ok, enc = cv2.imencode(ext, arr, params)
            assert ok
            out.append((ext, enc.tobytes()))
        if i == 0:
            colour = cv2.cvtColor(small, cv2.COLOR_GRAY2BGR) if small.ndim == 2 else small
            ok, enc = cv2.imencode(".png", colour)
            out.append((".png", enc.tobytes()))
            tifffile = pytest.importorskip("tifffile")
            tifffile.imwrite(folder / "pages.tif", np.stack([small] * 3), photometric="minisblack")
            out.append((".tif", (folder / "pages.tif").read_bytes()))
    return out


_INTERESTING = [0, 1, 0x7F, 0x80, 0xFF, 0x7FFF, 0x8000, 0xFFFF, 0x7FFFFFFF, 0x80000000, 0xFFFFFFFF, 65500, 30000]


def _mutate(rng: np.random.Generator, data: bytes, other: bytes) -> bytes:
    import struct
    import zlib

    b = bytearray(data)
    kind = int(rng.integers(0, 11))
    n = len(b)
    if kind == 0:  # flip bits
        for _ in range(int(rng.integers(1, 33))):
            p = int(rng.integers(0, n))
            b[p] ^= 1 << int(rng.integers(0, 8))
    elif kind == 1:  # overwrite a span with random bytes
        p = int(rng.integers(0, n))
        k = int(rng.integers(1, 64))
        b[p:p + k] = rng.integers(0, 256, k, dtype=np.uint8).tobytes()
    elif kind == 2:  # truncate
        b = b[: int(rng.integers(0, n))]
    elif kind == 3:  # insert random bytes
        p = int(rng.integers(0, n))
        b[p:p] = rng.integers(0, 256, int(rng.integers(1, 256)), dtype=np.uint8).tobytes()
    elif kind == 4:  # delete a span
        p = int(rng.integers(0, n))
        del b[p:p + int(rng.integers(1, 512))]
    elif kind == 5:  # duplicate a span
        p = int(rng.integers(0, n))
        k = int(rng.integers(1, 2048))
        b[p:p] = b[p:p + k]
    elif kind == 6:  # an interesting 2- or 4-byte value in the header
        p = int(rng.integers(0, min(n, 128)))
        v = _INTERESTING[int(rng.integers(0, len(_INTERESTING)))]
        fmt = ["<H", ">H", "<I", ">I"][int(rng.integers(0, 4))]
        raw = struct.pack(fmt, v & (0xFFFF if "H" in fmt else 0xFFFFFFFF))
        b[p:p + len(raw)] = raw
    elif kind == 7 and data[:8] == b"\x89PNG\r\n\x1a\n":  # PNG: new declared size with a valid CRC
        w = int(rng.choice([1, 31, 33, 5000, 30000, 65535, 2**31 - 1, int(rng.integers(1, 1 << 20))]))
        h = int(rng.choice([1, 31, 33, 5000, 30000, 65535, 2**31 - 1, int(rng.integers(1, 1 << 20))]))
        b[16:24] = struct.pack(">II", w, h)
        b[29:33] = struct.pack(">I", zlib.crc32(bytes(b[12:29])) & 0xFFFFFFFF)
    elif kind == 8:  # splice two files
        b = b[: int(rng.integers(0, n))] + other[int(rng.integers(0, len(other))):]
    elif kind == 9:  # another format's magic bytes in front
        magic = [b"\x89PNG\r\n\x1a\n", b"II*\x00", b"MM\x00*", b"\xff\xd8\xff", b"BM", b"P5\n"]
        m = magic[int(rng.integers(0, len(magic)))]
        b[: len(m)] = m
    else:  # interesting values sprinkled anywhere
        for _ in range(int(rng.integers(1, 9))):
            p = int(rng.integers(0, max(1, n - 4)))
            b[p:p + 4] = struct.pack("<I", _INTERESTING[int(rng.integers(0, len(_INTERESTING)))])
    return bytes(b)


class _Server:
    def __init__(self, env: dict, warm_up: Path):
        self.proc = subprocess.Popen([sys.executable, "-c", SERVER, str(MEMORY_LIMIT_MB), str(warm_up)],
                                     stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True, env=env, cwd=REPO)

    def run(self, argv: list[str], stderr_path: Path) -> dict:
        self.proc.stdin.write(json.dumps({"argv": argv, "stderr": str(stderr_path), "timeout": CASE_TIMEOUT_S})
                              + "\n")
        self.proc.stdin.flush()
        line = self.proc.stdout.readline()
        if not line:
            raise RuntimeError("the fuzz server died")
        return json.loads(line)

    def close(self) -> None:
        self.proc.stdin.close()
        try:
            self.proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()


def _judge(ans: dict, err: str) -> str | None:
    if ans.get("timeout"):
        return f"no answer within {CASE_TIMEOUT_S:.0f} s (hang)"
    if "signal" in ans:
        return f"killed by signal {ans['signal']}"
    rc = ans["rc"]
    if rc not in ALLOWED:
        return f"exit status {rc}"
    if "Traceback" in err:
        return "traceback on stderr"
    lines = err.splitlines()
    if rc != 0 and (len(lines) != 1 or not lines[0].startswith("ringgauge: ")):
        return f"{len(lines)} line(s) on stderr"
    if rc == 0 and len(lines) > 1:
        return f"{len(lines)} lines on stderr after success"
    return None


@pytest.mark.slow
def test_mutated_images_end_cleanly(tmp_path):
    rng = np.random.default_rng(SEED)
    bases = _bases(tmp_path)
    exts = [".png", ".tif", ".tiff", ".jpg", ".bmp", ".pgm", ".ppm"]
    cases = []
    for i in range(N_CASES):
        ext, data = bases[int(rng.integers(0, len(bases)))]
        other = bases[int(rng.integers(0, len(bases)))][1]
        mutated = _mutate(rng, data, other)
        if rng.random() < 0.15:
            ext = exts[int(rng.integers(0, len(exts)))]  # a file whose ending lies about its format
        f = tmp_path / f"case{i:03d}{ext}"
        f.write_bytes(mutated)
        cases.append(f)
    env = {**os.environ, "RINGGAUGE_HOME": str(tmp_path / "home"), "OPENBLAS_NUM_THREADS": "1",
           "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    warm = tmp_path / "warm-up.png"
    warm.write_bytes(bases[0][1])
    servers = [_Server(env, warm) for _ in range(2)]
    results: dict[int, tuple[dict, str]] = {}
    start = time.monotonic()
    lock = threading.Lock()
    queue = list(range(len(cases)))

    def drive(server: _Server) -> None:
        while True:
            with lock:
                if not queue or time.monotonic() - start > TIME_BUDGET_S:
                    return
                i = queue.pop(0)
            err_path = tmp_path / f"case{i:03d}.err"
            ans = server.run(["analyze", str(cases[i]), "--source", "sodium-d", "--pixel-size", "25",
                              "--json", "--max-megapixels", "4"], err_path)
            err = err_path.read_text(errors="replace") if err_path.exists() else ""
            with lock:
                results[i] = (ans, err)

    threads = [threading.Thread(target=drive, args=(s,)) for s in servers]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for s in servers:
        s.close()
    elapsed = time.monotonic() - start
    bad = {i: why for i, (ans, err) in results.items() if (why := _judge(ans, err))}
    codes = {}
    for ans, _ in results.values():
        key = ans.get("rc", "other")
        codes[key] = codes.get(key, 0) + 1
    report = "; ".join(f"{cases[i].name}: {why} — {results[i][1].strip()[:200]!r}" for i, why in sorted(bad.items()))
    assert not bad, f"{len(bad)} of {len(results)} mutated files did not end cleanly: {report}"
    slowest = max(ans.get("elapsed", 0.0) for ans, _ in results.values())
    # a busy machine runs fewer cases in the time budget, but never too few to mean something
    assert len(results) >= 40, f"only {len(results)} cases ran in {elapsed:.0f} s (exit statuses {codes})"
    print(f"fuzz: {len(results)} cases in {elapsed:.1f} s, slowest {slowest:.1f} s, exit statuses {codes}")
