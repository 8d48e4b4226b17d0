"""Server memory while receiving a 200 MB upload (target: growth <= 64 MB; the body is streamed to disk).

Run: .venv/bin/python -m bench.bench_upload_memory [--megabytes 200]

Starts the real server (uvicorn on 127.0.0.1, temp data folder), streams a file of that size as a multipart
upload from a generator (so the client holds little memory either), and samples the server process's resident
memory (VmRSS) every 20 ms while the request is in flight. The file is random bytes named .tif, which the server
receives completely before it refuses it as not a TIFF, so the whole body passes through the receiving path.
Reference in the same run: the server's resident memory at rest after a small request.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import httpx

from bench.bench_load import free_port, prepare, start_server
from tracedesk.config import Settings

CHUNK = 1 << 20


def rss_kib(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    return 0


def children_rss_kib(pid: int) -> int:
    """The uvicorn worker is a child of the supervisor; sum the tree."""
    total = rss_kib(pid)
    for child in Path(f"/proc/{pid}/task").glob("*/children"):
        for child_pid in child.read_text().split():
            total += children_rss_kib(int(child_pid))
    return total


def body(megabytes: int, boundary: str) -> Iterator[bytes]:
    yield (
        f'--{boundary}\r\nContent-Disposition: form-data; name="files"; filename="big.tif"\r\n'
        "Content-Type: image/tiff\r\n\r\n"
    ).encode()
    block = os.urandom(CHUNK)
    for _ in range(megabytes):
        yield block
    yield f"\r\n--{boundary}--\r\n".encode()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--megabytes", type=int, default=200)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        settings = Settings(
            environment="test", data_dir=Path(folder) / "data", database_url=f"sqlite:///{Path(folder) / 'mem.sqlite3'}"
        )
        token = prepare(settings, 1)[0]
        port = free_port()
        server = start_server(settings, port, workers=1)
        base = f"http://127.0.0.1:{port}"
        headers = {"Authorization": f"Bearer {token}"}
        try:
            with httpx.Client(base_url=base, headers=headers, timeout=300) as client:
                collection = client.post("/api/v1/collections", json={"name": "Memory"}).json()["id"]
                time.sleep(1.0)
                at_rest = children_rss_kib(server.pid)
                peak = [at_rest]
                done = threading.Event()

                def sample() -> None:
                    while not done.is_set():
                        peak[0] = max(peak[0], children_rss_kib(server.pid))
                        time.sleep(0.02)

                sampler = threading.Thread(target=sample)
                sampler.start()
                boundary = "tracedeskbenchboundary"
                started = time.perf_counter()
                response = client.post(
                    f"/api/v1/collections/{collection}/sheets",
                    content=body(args.megabytes, boundary),
                    headers={"Content-Type": f"multipart/form-data; boundary={boundary}"},
                )
                elapsed = time.perf_counter() - started
                done.set()
                sampler.join()
        finally:
            server.terminate()
            server.wait(timeout=30)
        growth_mib = (peak[0] - at_rest) / 1024
        print("| upload | status | seconds | server RSS at rest (reference) | peak growth while receiving |")
        print("|---|---|---|---|---|")
        print(
            f"| {args.megabytes} MB | {response.status_code} | {elapsed:.1f} | {at_rest / 1024:.0f} MiB |"
            f" {growth_mib:.1f} MiB |"
        )


if __name__ == "__main__":
    main()
