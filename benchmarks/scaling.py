"""Scaling: throughput of heatwalk.fit for 1 and 2 processes and for 1…N threads, and memory per data row.

All runs fit T² (torsion pairs) with an MLP 256×3, Adam, global batch ``--batch``:

1. processes: W = 1 and 2 processes started as torchrun starts them (environment variables, gloo over the
   loopback interface, one thread each), best of ``--repeats`` alternating runs. Throughput is steps/s of
   the training loop (``record["train_seconds"]``, start-up excluded) and samples/s = steps/s × batch;
   scaling efficiency = throughput(2) / (2 · throughput(1)).
2. where a step's time goes: the part every rank repeats (batch indices, reading the rows, the exact
   forward draws of the whole global batch: ``objective.draw``) against the part that is split (score
   target, network forward and backward: ``objective.share_loss`` + backward) on the whole batch and on
   half of it. With r the repeated share of a 1-process step, Amdahl's law bounds the efficiency of 2
   processes by 1 / (2r + (1 - r)) before communication.
3. threads: one process with 1 … N intra-op threads (N = the machine's cores).
4. memory: peak growth of private anonymous memory (RssAnon) while fitting ``--rows`` torsion pairs from
   a memory-mapped .npy file and from the same array loaded, in a fresh process each; bytes per row.

    python benchmarks/scaling.py [--steps 200] [--batch 512] [--repeats 2] [--rows 10000000] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
import torch

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

NETWORK = {"hidden": 256, "depth": 3, "residual": False}  # the MLP


def _data(n: int, seed: int = 1) -> torch.Tensor:
    from heatwalk.spaces import Torus

    return Torus(2).random_uniform(n, torch.Generator().manual_seed(seed))


# ----- 1. processes ---------------------------------------------------------------------------------------
def _process_worker(rank: int, world: int, port: int, steps: int, batch: int, out: str) -> None:
    from distributed_worker import launcher_env

    os.environ.update(launcher_env(rank, world, port))
    torch.set_num_threads(1)
    import heatwalk
    from heatwalk.spaces import Torus

    model = heatwalk.fit(Torus(2), _data(100_000), steps=steps, batch_size=batch, seed=0, progress=False,
                         network=NETWORK)
    if rank == 0:
        Path(out).write_text(json.dumps(model.record))


def processes(world: int, steps: int, batch: int) -> float:
    """steps/s of one launch of ``world`` processes."""
    from distributed_worker import free_ports

    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "record.json"
        torch.multiprocessing.spawn(_process_worker, args=(world, free_ports(1)[0], steps, batch, str(out)),
                                    nprocs=world, join=True)
        record = json.loads(out.read_text())
    assert record["processes"] == world
    return steps / record["train_seconds"]


# ----- 2. the split of a step --------------------------------------------------------------------------------
def step_split(batch: int, repeats: int = 30) -> dict:
    """Seconds per step of the repeated part and of the split part (whole batch and half of it), one thread."""
    from heatwalk.core.objectives import make_objective
    from heatwalk.core.parallel import Share
    from heatwalk.spaces import Torus

    torch.set_num_threads(1)
    space = Torus(2)
    data = _data(100_000)
    objective = make_objective(space)
    torch.manual_seed(0)
    net = objective.default_network(**NETWORK)
    gen = torch.Generator().manual_seed(0)

    def repeated():
        idx = torch.randint(data.shape[0], (batch,), generator=gen)
        return objective.draw(space.take(data, idx), gen)

    def split(drawn, share):
        net.zero_grad(set_to_none=True)
        objective.share_loss(net, drawn, share).backward()

    best = {"repeated": 1e9, "split_whole": 1e9, "split_half": 1e9}
    for _ in range(repeats):
        t0 = time.perf_counter()
        drawn = repeated()
        t1 = time.perf_counter()
        split(drawn, Share())
        t2 = time.perf_counter()
        split(drawn, Share(0, 2))
        t3 = time.perf_counter()
        best = {"repeated": min(best["repeated"], t1 - t0), "split_whole": min(best["split_whole"], t2 - t1),
                "split_half": min(best["split_half"], t3 - t2)}
    return best


# ----- 3. threads ---------------------------------------------------------------------------------------------
def threads(n: int, steps: int, batch: int) -> float:
    import heatwalk
    from heatwalk.spaces import Torus

    model = heatwalk.fit(Torus(2), _data(100_000), steps=steps, batch_size=batch, seed=0, progress=False,
                         network=NETWORK, threads=n)
    return steps / model.record["train_seconds"]


# ----- 4. memory ------------------------------------------------------------------------------------------------
MEMORY_SCRIPT = textwrap.dedent("""
    import sys, threading, time
    import numpy as np, torch
    torch.set_num_threads(1)
    import heatwalk
    from heatwalk.io.arrays import open_array
    from heatwalk.spaces import Torus

    def status(key):
        for line in open("/proc/self/status"):
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024

    mode, path, steps, batch = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    net = {"hidden": 256, "depth": 3, "residual": False}
    heatwalk.fit(Torus(2), torch.zeros(64, 2, dtype=torch.float64), steps=2, batch_size=32, progress=False,
                 network=net)
    peak, done = [0], [False]

    def watch():
        while not done[0]:
            peak[0] = max(peak[0], status("RssAnon"))
            time.sleep(0.001)

    base = status("RssAnon")
    thread = threading.Thread(target=watch)
    thread.start()
    t0 = time.perf_counter()
    data = open_array(path) if mode == "mapped" else np.load(path)
    model = heatwalk.fit(Torus(2), data, steps=steps, batch_size=batch, progress=False, network=net)
    total = time.perf_counter() - t0
    done[0] = True
    thread.join()
    print(max(peak[0], status("RssAnon")) - base, status("VmHWM"), total, steps / model.record["train_seconds"])
""")


def memory(rows: int, steps: int, batch: int) -> dict:
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "torsions.npy"
        arr = np.lib.format.open_memmap(path, mode="w+", dtype=np.float64, shape=(rows, 2))
        g = np.random.default_rng(0)
        for a in range(0, rows, 1 << 20):
            b = min(rows, a + (1 << 20))
            arr[a:b] = g.uniform(-np.pi, np.pi, (b - a, 2))
        arr.flush()
        del arr
        for mode in ("mapped", "loaded"):
            res = subprocess.run([sys.executable, "-c", MEMORY_SCRIPT, mode, str(path), str(steps), str(batch)],
                                 check=True, capture_output=True, text=True).stdout.split()
            growth, hwm, total, sps = int(res[0]), int(res[1]), float(res[2]), float(res[3])
            out[mode] = {"anon_growth_bytes": growth, "peak_rss_bytes": hwm, "seconds_with_validation": total,
                         "steps_per_s": sps, "bytes_per_row": growth / rows}
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--steps", type=int, default=200)
    ap.add_argument("--batch", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--max-threads", type=int, default=os.cpu_count())
    ap.add_argument("--json")
    a = ap.parse_args()
    res = {"machine": f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at start",
           "steps": a.steps, "batch": a.batch}

    best = {1: 0.0, 2: 0.0}
    for _ in range(a.repeats):
        for world in (1, 2):
            best[world] = max(best[world], processes(world, a.steps, a.batch))
    res["processes"] = {str(w): {"steps_per_s": s, "samples_per_s": s * a.batch} for w, s in best.items()}
    res["efficiency"] = best[2] / (2 * best[1])

    split = step_split(a.batch)
    r = split["repeated"] / (split["repeated"] + split["split_whole"])
    res["step_split_seconds"] = split
    res["repeated_share"] = r
    res["amdahl_bound"] = 1 / (2 * r + (1 - r))

    res["threads"] = {}
    for n in range(1, a.max_threads + 1):
        res["threads"][str(n)] = max(threads(n, a.steps, a.batch) for _ in range(a.repeats))
    torch.set_num_threads(1)

    res["memory"] = memory(a.rows, 50, a.batch)
    res["machine"] += f", {os.getloadavg()[0]:.1f} at the end"

    print(f"heatwalk.fit on T², MLP 256x3, global batch {a.batch}, {a.steps} steps, best of {a.repeats}; "
          f"{res['machine']}")
    print(f"{'processes':<12} {'steps/s':>9} {'samples/s':>11}")
    for w in (1, 2):
        p = res["processes"][str(w)]
        print(f"{w:<12} {p['steps_per_s']:>9.1f} {p['samples_per_s']:>11.0f}")
    print(f"scaling efficiency throughput(2) / (2 throughput(1)) = {res['efficiency']:.2f} (goal >= 0.8)")
    print(f"one step, 1 thread: repeated part {1e3 * split['repeated']:.2f} ms, split part {1e3 * split['split_whole']:.2f} ms "
          f"whole / {1e3 * split['split_half']:.2f} ms half; repeated share {r:.2f}, Amdahl bound {res['amdahl_bound']:.2f}")
    print(f"{'threads':<12} {'steps/s':>9}")
    for n, s in res["threads"].items():
        print(f"{n:<12} {s:>9.1f}")
    print(f"{'data of ' + format(a.rows, ',') + ' rows':<28} {'RssAnon growth':>15} {'bytes/row':>10} {'peak RSS':>10} "
          f"{'steps/s':>8}")
    for mode, m in res["memory"].items():
        print(f"{mode:<28} {m['anon_growth_bytes'] / 2**20:>12.1f} MB {m['bytes_per_row']:>10.2f} "
              f"{m['peak_rss_bytes'] / 2**20:>7.0f} MB {m['steps_per_s']:>8.1f}")
    if a.json:
        Path(a.json).write_text(json.dumps(res, indent=2) + "\n")


if __name__ == "__main__":
    main()
