#!/usr/bin/env python3
"""Bounded throughput run against a `trapwise serve` on loopback.

Sends COUNT uploads of raw f32 recordings (each with its own trap label, so none is answered from
the store as a repeat) from CONCURRENCY threads, stops early once LIMIT seconds have passed, and
prints calibrations per second, median and 99th-percentile latency (nearest-rank, common
practice), the status counts, and the service's peak resident memory (VmHWM from
/proc/PID/status, Linux) when its pid is given. Standard library only; it refuses any address
that is not loopback.
"""

import argparse
import ipaddress
import json
import math
import threading
import time
import urllib.error
import urllib.parse
import urllib.request


def vm_hwm_kib(pid):
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def nearest_rank(sorted_values, q):
    if not sorted_values:
        return None
    rank = max(1, math.ceil(q * len(sorted_values)))
    return sorted_values[rank - 1]


def main():
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--host", default="127.0.0.1")
    p.add_argument("--port", type=int, required=True)
    p.add_argument("--files", nargs="+", required=True, help="raw f32 recordings, one axis")
    p.add_argument("--sample-rate", type=float, default=50_000.0)
    p.add_argument("--count", type=int, default=40)
    p.add_argument("--concurrency", type=int, default=4)
    p.add_argument("--limit", type=float, default=120.0, help="seconds")
    p.add_argument("--pid", type=int)
    p.add_argument("--run-id", default=str(int(time.time())))
    a = p.parse_args()
    if not ipaddress.ip_address(a.host).is_loopback:
        raise SystemExit(f"{a.host} is not a loopback address")
    bodies = []
    for path in a.files:
        with open(path, "rb") as fh:
            bodies.append(fh.read())

    lock = threading.Lock()
    next_idx = [0]
    latencies, statuses = [], {}
    deadline = time.monotonic() + a.limit

    def worker():
        while True:
            with lock:
                idx = next_idx[0]
                if idx >= a.count or time.monotonic() > deadline:
                    return
                next_idx[0] += 1
            query = urllib.parse.urlencode(
                {
                    "instrument": "bench",
                    "trap": f"t{a.run_id}-{idx}",
                    "file_name": "x.f32",
                    "format": "raw-f32",
                    "sample_rate_hz": a.sample_rate,
                    "units": "nm",
                    "bead_diameter_um": 1,
                    "temperature_c": 25,
                }
            )
            req = urllib.request.Request(
                f"http://{a.host}:{a.port}/api/v1/calibrations?{query}",
                data=bodies[idx % len(bodies)],
                headers={"Content-Type": "application/octet-stream"},
                method="POST",
            )
            start = time.monotonic()
            try:
                with urllib.request.urlopen(req, timeout=a.limit) as resp:
                    resp.read()
                    status = resp.status
            except urllib.error.HTTPError as e:
                status = e.code
            except (urllib.error.URLError, TimeoutError):
                status = "error"
            elapsed = time.monotonic() - start
            with lock:
                statuses[str(status)] = statuses.get(str(status), 0) + 1
                if status in (200, 201):
                    latencies.append(elapsed)

    t0 = time.monotonic()
    threads = [threading.Thread(target=worker) for _ in range(a.concurrency)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    wall = time.monotonic() - t0
    latencies.sort()
    print(
        json.dumps(
            {
                "uploads_sent": sum(statuses.values()),
                "statuses": statuses,
                "concurrency": a.concurrency,
                "bytes_per_upload": len(bodies[0]),
                "wall_s": wall,
                "calibrations_per_s": len(latencies) / wall if wall > 0 else None,
                "latency_median_s": nearest_rank(latencies, 0.5),
                "latency_p99_s": nearest_rank(latencies, 0.99),
                "service_peak_rss_mib": (vm_hwm_kib(a.pid) / 1024) if a.pid and vm_hwm_kib(a.pid) else None,
            }
        )
    )


if __name__ == "__main__":
    main()
