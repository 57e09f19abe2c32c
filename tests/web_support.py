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
