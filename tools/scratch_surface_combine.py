"""Scratch (s31): old vs combined surface spin on the crf 18, crf 23, 10 px and 1/4000 s rows, six seeds each,
clips made as in tests/benchmarks/bench_surface_spin.py run_case. MODE=gls|ivm; rows as argv[1]."""
import math, multiprocessing, os, sys, time
for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")
import numpy as np
sys.path.insert(0, "/work/w31/tests/benchmarks"); sys.path.insert(0, "/work/w31/tests")
from surface_render import SpinScene, render_spin_clip
from balltraj.vision.surface_spin import RPM_PER_RADPS, estimate_surface_spin
SPEED = 35.0 / 0.0366

def clip(fps=240.0, radius=14.0, exposure=1/8000, noise=2.0, crf=None, texture="seams", seed=0):
    rng = np.random.default_rng(100 + seed)
    axis = rng.normal(size=3); axis /= np.linalg.norm(axis)
    rate = rng.uniform(1200, 2800) / RPM_PER_RADPS
    spin = axis * rate
    n = int(np.clip(round(fps * 0.03), 8, 16))
    v = SPEED * radius
    w = int(2 * (2.2 * radius + 4) + v * n / fps) // 2 * 2 + 2
    h = int(5 * radius) // 2 * 2 + 8
    sub = int(np.clip(max(rate * exposure / 0.06, v * exposure / 1.0) + 2, 3, 24))
    sc = SpinScene(radius_px=radius, image_size=(w, h), fps=fps, n_frames=n, exposure_s=exposure,
                   spin=tuple(spin), start_px=(2.2 * radius + 3, h / 2), velocity_pxps=(v, 0.6 * radius * fps / n),
                   texture=texture, noise=noise, subframes=sub, supersample=2, h264_crf=crf, seed=seed)
    frames, truth = render_spin_clip(sc)
    out = []
    for comb in (False, True):
        t0 = time.perf_counter()
        res = estimate_surface_spin(list(frames), truth["t"], exposure_s=exposure, combine=comb)
        dt = time.perf_counter() - t0
        if not res.readable:
            out.append(None); continue
        er = 100 * (res.rate_rpm / (rate * RPM_PER_RADPS) - 1)
        ea = math.degrees(math.acos(min(1, float(res.spin_radps @ spin) / np.linalg.norm(res.spin_radps) / rate)))
        out.append((er, 100 * res.rate_sigma_rpm / res.rate_rpm, ea, res.axis_sigma_deg, dt))
    return out

ROWS = {"crf18": dict(crf=18), "crf23": dict(crf=23), "10px": dict(radius=10), "1/4000": dict(exposure=1/4000)}
import balltraj.vision.surface_spin as _ss
_ss._MODE = os.environ.get("MODE", "ivm")
def job(a):
    row, seed = a
    return row, seed, clip(seed=seed, **ROWS[row])

if __name__ == "__main__":
    rows = sys.argv[1].split(",") if len(sys.argv) > 1 else list(ROWS)
    jobs = [(r, s) for r in rows for s in range(6)]
    with multiprocessing.Pool(2) as p:
        res = p.map(job, jobs, chunksize=1)
    for r in rows:
        print(f"== {r}")
        errs = {0: [], 1: []}
        for row, seed, o in res:
            if row != r: continue
            line = f"seed {seed}: "
            for i, x in enumerate(o):
                if x is None: line += " declined | "; continue
                errs[i].append(x)
                line += f"rate {x[0]:+5.2f} sig {x[1]:4.2f} z {abs(x[0])/x[1]:4.2f} axis {x[2]:4.2f} asig {x[3]:4.2f} t {x[4]:5.1f} | "
            print(line, flush=True)
        for i, name in ((0, "old"), (1, "new")):
            e = np.array([x[0] for x in errs[i]])
            zz = np.array([abs(x[0]) / x[1] for x in errs[i]])
            print(f"  {name}: n {len(e)} RMS {np.sqrt(np.mean(e**2)):.2f} worst {e[np.argmax(abs(e))]:+.2f} within1sig {np.sum(zz<=1)}/{len(e)} axis worst {max(x[2] for x in errs[i]):.2f}")
