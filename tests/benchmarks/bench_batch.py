"""Batch throughput: clips per minute with 1 and 2 local workers (ratio), on copies of the sample
pitch clip (960x540, 240 fps, 0.8 s).

Run: python tests/benchmarks/bench_batch.py
"""
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
N = 8


def run(workers, folder, lib):
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "balltraj", "batch", str(folder), "--camera",
                    str(ROOT / "calibration" / "pitch-side.json"), "--ball", "baseball", "--library", str(lib),
                    "--start-near", "0,0.25,1.78", "--workers", str(workers)], check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def main():
    data = (ROOT / "sample_clips" / "pitch-side.mp4").read_bytes()
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d) / "clips"
        folder.mkdir()
        for i in range(N):
            (folder / f"c{i}.mp4").write_bytes(data + f"{i}".encode())
        t1 = run(1, folder, Path(d) / "one.db")
        t2 = run(2, folder, Path(d) / "two.db")
    print(f"{N} clips: 1 worker {t1:.1f} s ({60 * N / t1:.0f} clips/min); 2 workers {t2:.1f} s "
          f"({60 * N / t2:.0f} clips/min); speed-up {t1 / t2:.2f}x")


if __name__ == "__main__":
    main()
