"""Processes of the data-parallel tests: started with torch.multiprocessing, talking over loopback only.

Each process is given the launcher's environment (RANK, WORLD_SIZE, LOCAL_RANK, MASTER_ADDR=127.0.0.1,
MASTER_PORT) exactly as torchrun sets it, with gloo bound to the loopback interface, and runs a list of jobs;
``heatwalk.fit`` starts and ends the process group itself (the torchrun path). Rank 0 writes the results.
"""

from __future__ import annotations

import gc
import os
import socket
from pathlib import Path

import torch

LOOPBACK = "127.0.0.1"


def free_ports(k: int) -> list[int]:
    """k distinct free TCP ports on the loopback interface."""
    socks, ports = [], []
    for _ in range(k):
        s = socket.socket()
        s.bind((LOOPBACK, 0))
        socks.append(s)
        ports.append(s.getsockname()[1])
    for s in socks:
        s.close()
    return ports


def launcher_env(rank: int, world: int, port: int) -> dict:
    return {"RANK": str(rank), "WORLD_SIZE": str(world), "LOCAL_RANK": str(rank), "LOCAL_WORLD_SIZE": str(world),
            "MASTER_ADDR": LOOPBACK, "MASTER_PORT": str(port), "GLOO_SOCKET_IFNAME": "lo"}


# ----- the problems (the same functions build them in the test process) ---------------------------------
def make_space(name: str):
    from heatwalk.spaces import Categories, Product, Torus

    return {"torus": lambda: Torus(2),
            "categories": lambda: Categories(4, 5, process="absorbing"),
            "product": lambda: Product(Torus(1), Categories(3, 2, process="uniform"))}[name]()


def make_data(name: str, n: int = 256):
    space = make_space(name)
    g = torch.Generator().manual_seed(11)
    if name == "torus":
        centre = torch.tensor([[0.5, -1.0]], dtype=torch.float64)
        return space.sample_forward(centre.expand(n, 2), 0.3, g)
    if name == "categories":
        base = torch.randint(4, (1, 5), generator=g).expand(n, -1)
        flip = torch.rand(n, 5, generator=g) < 0.3
        return torch.where(flip, torch.randint(4, (n, 5), generator=g), base)
    angles = space.factors[0].sample_forward(torch.zeros(n, 1, dtype=torch.float64), 0.5, g)
    codes = (angles[:, :1] > 0).long().expand(n, 2).clone()
    return (angles, codes)


NETWORK = {"torus": {"hidden": 32, "depth": 2}, "categories": {"d_model": 16, "n_layers": 1, "n_heads": 2},
           "product": {"hidden": 32, "depth": 2}}
FIT = dict(steps=20, batch_size=64, lr=2e-3, ema_decay=0.99, seed=3, progress=False)


class Interrupted(Exception):
    """Raised by every rank right after the checkpoint of a chosen step: a run stopped there."""


# ----- jobs ---------------------------------------------------------------------------------------------
def _fit(job, out: Path, rank: int):
    import heatwalk
    from heatwalk.core import parallel

    name = job["problem"]
    model = heatwalk.fit(make_space(name), make_data(name), network=NETWORK[name], **{**FIT, **job.get("fit", {})})
    assert not parallel.is_distributed(), "fit must end the process group it started"
    if parallel.is_main_process():
        model.save(out / job["name"])
    torch.save({k: v.clone() for k, v in model.network.state_dict().items()}, out / f"{job['name']}.rank{rank}.pt")


def _interrupted_fit(job, out: Path, rank: int):
    from heatwalk.core import training

    original = training._checkpoint

    def stop_after(path, run_config, step, run, losses):
        original(path, run_config, step, run, losses)
        if step == job["stop_at"]:
            raise Interrupted(step)

    training._checkpoint = stop_after
    try:
        _fit(job, out, rank)
    except Interrupted:
        pass
    else:
        raise AssertionError("the run was not interrupted")
    finally:
        training._checkpoint = original
        from heatwalk.core import parallel

        parallel.shutdown()  # what fit's own clean-up does on an error, made sure


def _gradient(job, out: Path, rank: int):
    """One DistributedDataParallel backward pass of the global batch: the averaged gradients."""
    from heatwalk.core import parallel
    from heatwalk.core.objectives import make_objective

    torch.distributed.init_process_group("gloo")
    share = parallel.world()
    name = job["problem"]
    space = make_space(name)
    objective = make_objective(space)
    torch.manual_seed(5)
    net = objective.default_network(**NETWORK[name])
    ddp = torch.nn.parallel.DistributedDataParallel(net)
    x0 = space.take(make_data(name), slice(0, 64))
    drawn = objective.draw(x0, torch.Generator().manual_seed(9))
    objective.share_loss(ddp, drawn, share).backward()
    if rank == 0:
        torch.save({n: p.grad.clone() for n, p in net.named_parameters()}, out / f"{job['name']}.pt")
    del ddp  # before the group goes (see heatwalk.core.training.fit)
    gc.collect()
    torch.distributed.destroy_process_group()


JOBS = {"fit": _fit, "interrupted_fit": _interrupted_fit, "gradient": _gradient}


def worker(rank: int, world: int, jobs: list, out: str) -> None:
    """Run ``jobs`` as rank ``rank`` of ``world`` (each job has its own rendezvous port)."""
    torch.set_num_threads(1)
    for job in jobs:
        os.environ.update(launcher_env(rank, world, job["port"]))
        JOBS[job["kind"]](job, Path(out), rank)


def run(world: int, jobs: list, out) -> None:
    """Start ``world`` processes running ``jobs`` and wait for them (an error in any of them is raised here)."""
    ports = free_ports(len(jobs))
    jobs = [{**job, "port": p} for job, p in zip(jobs, ports)]
    torch.multiprocessing.spawn(worker, args=(world, jobs, str(out)), nprocs=world, join=True)
