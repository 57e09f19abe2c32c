"""Helpers of the web view tests: the view as a user starts it, in its own process."""

from __future__ import annotations

import re
import subprocess
import sys
import time
from pathlib import Path

from sevenfold.queue.home import Home

from queue_support import WAIT, env


class ViewProcess:
    """``sevenfold view --port 0`` in the background; ``url`` and ``token`` from what it prints."""

    def __init__(self, home: Home | Path, environ: dict[str, str] | None = None) -> None:
        root = home.root if isinstance(home, Home) else Path(home)
        self.out = root.parent / f"view-{time.monotonic_ns()}.out"
        self._fh = open(self.out, "w")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "sevenfold.cli", "view", "--home", str(root), "--port", "0"],
            stdout=self._fh, stderr=subprocess.STDOUT, env=environ or env(),
        )
        deadline = time.monotonic() + WAIT
        while True:
            text = self.out.read_text()
            m = re.search(r"(http://127\.0\.0\.1:\d+)/\?token=(\S+)", text)
            if m:
                self.url, self.token = m.group(1), m.group(2)
                break
            if self.proc.poll() is not None or time.monotonic() > deadline:
                self.stop()
                raise AssertionError(f"sevenfold view did not print its link:\n{text}")
            time.sleep(0.05)

    def output(self) -> str:
        return self.out.read_text()

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._fh.close()


class Pollers:
    """``clients`` threads that poll the view as its pages do, until :meth:`stop`.

    Each client asks for the queue (with the version it holds, as the queue page does) and
    for one job (with the residual points it already has, as a job page does), then waits
    ``every`` seconds. Status codes, failures and response times are counted.
    """

    def __init__(self, url: str, job_ids: list[int], clients: int = 20, every: float = 1.0) -> None:
        import threading

        self.url, self.job_ids, self.every = url, job_ids, every
        self.stopping = threading.Event()
        self.lock = threading.Lock()
        self.codes: dict[int, int] = {}
        self.failures: list[str] = []
        self.seconds: list[float] = []
        self.threads = [threading.Thread(target=self._client, args=(i,), daemon=True) for i in range(clients)]
        for t in self.threads:
            t.start()

    def _get(self, path: str) -> dict | None:
        import json
        import urllib.error
        import urllib.request

        t0 = time.perf_counter()
        try:
            with urllib.request.urlopen(self.url + path, timeout=60) as r:
                code, body = r.status, r.read()
        except urllib.error.HTTPError as exc:
            code, body = exc.code, b""
        except Exception as exc:  # refused, reset, timed out: all count as lost
            with self.lock:
                self.failures.append(f"{path}: {exc!r}")
            return None
        with self.lock:
            self.codes[code] = self.codes.get(code, 0) + 1
            self.seconds.append(time.perf_counter() - t0)
        return json.loads(body) if code == 200 else None

    def _client(self, i: int) -> None:
        version, job_id = None, self.job_ids[i % len(self.job_ids)]
        after, run = -1, None
        while not self.stopping.is_set():
            q = self._get("/api/queue" + (f"?since={version}" if version else ""))
            if q and q.get("jobs") is not None:
                version = q["version"]
            d = self._get(f"/api/jobs/{job_id}?after={after}" + (f"&run={run}" if run else ""))
            if d:
                p = d["progress"]
                if p["reset"]:
                    after = -1
                run = p["run"]
                if p["points"]:
                    after = p["points"][-1][0]
            self.stopping.wait(self.every)

    def stop(self) -> None:
        self.stopping.set()
        for t in self.threads:
            t.join(120)

    @property
    def requests(self) -> int:
        return sum(self.codes.values()) + len(self.failures)
