"""How much two processes solving side by side slow each other on this machine (docs/performance.md).

Runs the throughput config's chunks in one process alone, then in two processes started at the same instant, each in
process (no pool, no pipes), and prints the samples/s of each. The loss is what the shared cache and memory cost;
no pool can scale past it. Usage: python tools/contention.py [rounds]
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHUNK, CHUNKS = 524_288, 12

WORKER = f"""
import sys, time
from mcmatch.config.loading import load_config
from mcmatch.run.chunks import run_chunk
from mcmatch.run.study import prepare
study = prepare(load_config({str(ROOT / "configs" / "throughput.toml")!r}))
run_chunk(study, 0, {CHUNK})  # warm
start_at = float(sys.argv[1])
while time.time() < start_at:
    time.sleep(0.001)
t = time.perf_counter()
for k in range({CHUNKS}):
    run_chunk(study, k * {CHUNK}, (k + 1) * {CHUNK})
print(f"{{{CHUNKS * CHUNK} / (time.perf_counter() - t):.3g}}")
"""


def run(processes: int) -> list[str]:
    start_at = str(time.time() + 3.0)  # after every process has imported and warmed up
    procs = [
        subprocess.Popen([sys.executable, "-c", WORKER, start_at], stdout=subprocess.PIPE, text=True)
        for _ in range(processes)
    ]
    return [p.communicate()[0].strip() for p in procs]


def main() -> None:
    rounds = int(sys.argv[1]) if len(sys.argv) > 1 else 2
    for r in range(rounds):
        print(f"round {r + 1}: alone {run(1)[0]} samples/s; two at once {', '.join(run(2))} samples/s each")


if __name__ == "__main__":
    main()
