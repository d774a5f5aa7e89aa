"""Bounded check: the API's memory while it receives a very large upload.

::

    python -m earfold.service.tools.upload_memory                 # 2 GB, spawns its own server

Starts ``earfold serve --workers 0`` on a free loopback port with a temporary data
directory, then uploads one WAV of ``--gb`` GB (10^9 bytes) to ``POST /v1/stems`` as a
streamed multipart body generated on the fly (the client never holds the file either;
Content-Length is declared, as curl does). The server's resident memory is read from
``/proc/PID/status``: ``VmRSS`` before, every ``SAMPLE_S`` during and after the upload,
and ``VmHWM`` (the peak, reset through ``/proc/PID/clear_refs`` just before the upload
where the kernel allows it). The stem is deleted and the data directory removed at the
end; it prints JSON with the growth figures in MiB.
"""

from __future__ import annotations

import argparse
import json
import struct
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import httpx

from .local_server import LocalServer, status_kib

#: RSS sampling period during the upload (s).
SAMPLE_S = 0.05

#: Size of each generated body chunk (bytes).
CHUNK = 1024 * 1024

#: Layout of the generated WAV: 7.1.4, 48 kHz, 24-bit (36 bytes per frame).
CHANNELS, RATE, BYTES_PER_SAMPLE = 12, 48000, 3


def wav_header(data_bytes: int) -> bytes:
    """A canonical 44-byte PCM WAV header for ``data_bytes`` of samples."""
    block = CHANNELS * BYTES_PER_SAMPLE
    return (
        b"RIFF"
        + struct.pack("<I", 36 + data_bytes)
        + b"WAVE"
        + b"fmt "
        + struct.pack("<IHHIIHH", 16, 1, CHANNELS, RATE, RATE * block, block, 8 * BYTES_PER_SAMPLE)
        + b"data"
        + struct.pack("<I", data_bytes)
    )


def multipart_body(total_file_bytes: int, boundary: str) -> tuple[int, Iterator[bytes]]:
    """(Content-Length, chunks) of a multipart body holding one generated WAV."""
    frame = CHANNELS * BYTES_PER_SAMPLE
    data_bytes = (total_file_bytes - 44) // frame * frame
    head = (
        f'--{boundary}\r\nContent-Disposition: form-data; name="file"; '
        f'filename="large.7.1.4.wav"\r\nContent-Type: audio/wav\r\n\r\n'
    ).encode()
    tail = f"\r\n--{boundary}--\r\n".encode()
    header = wav_header(data_bytes)
    # Quiet, non-zero samples: a repeating ramp, so no layer can compress it away.
    pattern = bytes((i * 7) & 0x0F for i in range(CHUNK))
    length = len(head) + len(header) + data_bytes + len(tail)

    def chunks() -> Iterator[bytes]:
        yield head + header
        left = data_bytes
        while left > 0:
            n = min(left, CHUNK)
            yield pattern[:n]
            left -= n
        yield tail

    return length, chunks()


def try_reset_peak(pid: int) -> bool:
    """Reset VmHWM of ``pid`` (``echo 5 > /proc/PID/clear_refs``, Linux 4.0+)."""
    try:
        Path(f"/proc/{pid}/clear_refs").write_text("5")
        return True
    except OSError:
        return False


def measure(gb: float) -> dict:
    with LocalServer(workers=0, extra_args=["--max-upload-gb", str(max(gb * 1.5, 1.0))]) as srv:
        pid = srv.pid
        with httpx.Client(base_url=srv.url, timeout=600) as http:
            http.get("/v1/health")  # warm: the first request imports a little
            time.sleep(0.5)
            before = status_kib(pid, "VmRSS")
            reset = try_reset_peak(pid)
            samples: list[int] = []
            stop = threading.Event()

            def sample() -> None:
                while not stop.is_set():
                    samples.append(status_kib(pid, "VmRSS"))
                    stop.wait(SAMPLE_S)

            sampler = threading.Thread(target=sample, daemon=True)
            sampler.start()
            boundary = "earfold-measure-boundary-7f3a"
            length, body = multipart_body(int(gb * 1e9), boundary)
            t0 = time.perf_counter()
            resp = http.post(
                "/v1/stems",
                content=body,
                headers={
                    "Content-Type": f"multipart/form-data; boundary={boundary}",
                    "Content-Length": str(length),
                },
            )
            seconds = time.perf_counter() - t0
            time.sleep(0.5)
            stop.set()
            sampler.join()
            after = status_kib(pid, "VmRSS")
            peak_hwm = status_kib(pid, "VmHWM")
            stem = resp.json()
            deleted = None
            if resp.status_code == 201:
                deleted = http.delete(f"/v1/stems/{stem['id']}").status_code
    mib = 1024.0
    return {
        "upload_bytes": length,
        "status": resp.status_code,
        "stem": {
            k: stem.get(k) for k in ("channels", "samplerate", "duration_s", "detail") if k in stem
        },
        "seconds": round(seconds, 1),
        "throughput_MB_s": round(length / seconds / 1e6, 1),
        "rss_before_MiB": round(before / mib, 1),
        "rss_after_MiB": round(after / mib, 1),
        "rss_peak_sampled_MiB": round(max(samples) / mib, 1),
        "peak_growth_sampled_MiB": round((max(samples) - before) / mib, 1),
        "vmhwm_MiB": round(peak_hwm / mib, 1),
        "vmhwm_was_reset": reset,
        "peak_growth_vmhwm_MiB": round((peak_hwm - before) / mib, 1) if reset else None,
        "samples": len(samples),
        "sample_period_s": SAMPLE_S,
        "stem_deleted_status": deleted,
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(
        prog="python -m earfold.service.tools.upload_memory", description=__doc__.split("\n\n")[0]
    )
    p.add_argument("--gb", type=float, default=2.0, help="upload size in GB (10^9 bytes)")
    args = p.parse_args(argv)
    json.dump(measure(args.gb), sys.stdout, indent=2)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
