"""Data-parallel training: 2 processes (gloo over loopback, started as torchrun starts them) against 1.

The claim under test (heatwalk.core.parallel): every rank draws the global batch's indices, times and noise from
the one seeded generator and evaluates its slice, so a W-process run computes the same losses on the same rows
as one process, and the weights differ only by the order of floating-point sums.

Tolerances. The networks are float32 (eps = 1.19e-7): splitting a batch's gradient sum into two partial sums
plus an all-reduce changes each gradient entry by a few eps relative; Adam normalises each step by the root of
its second moment, so after k steps a weight moves by at most ~k·lr·(relative change) — 20 steps × 2e-3 ×
1e-6 ≈ 4e-8 — plus the drift of the EMA. We allow 2e-5 absolute on weights of order 0.1–1 (hundreds of times
the estimate, still ~1e-4 of the weights' spread) and 1e-4 on network outputs and on samples after 20
reverse steps, where the learned score amplifies weight differences by its Lipschitz constant. One
exception, checked separately: the attention's key bias has an exact gradient of zero (see ``_max_diff``). A resumed run repeats the same operations
in the same order as the uninterrupted one, so it must agree exactly.
"""

from __future__ import annotations

import shutil

import pytest
import torch

import distributed_worker as dw
import heatwalk

WORLD = 2
PROBLEMS = ("torus", "categories", "product")
WEIGHT_ATOL = 2e-5
SAMPLE_ATOL = 1e-4

pytestmark = pytest.mark.skipif(not torch.distributed.is_available() or not torch.distributed.is_gloo_available(),
                                reason="this torch build has no torch.distributed with the gloo backend")


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """All 2-process jobs in one launch; returns the output folder."""
    out = tmp_path_factory.mktemp("dist")
    jobs = [{"kind": "fit", "name": f"{p}_2", "problem": p} for p in PROBLEMS]
    jobs += [{"kind": "gradient", "name": f"grad_{p}", "problem": p} for p in PROBLEMS]
    ckpt = {k: str(out / f"ckpt_{k}") for k in ("full", "cut", "cut_for_one")}
    every = {"checkpoint_every": 10}
    jobs += [
        {"kind": "fit", "name": "resume_full", "problem": "torus", "fit": {"checkpoint_dir": ckpt["full"], **every}},
        {"kind": "interrupted_fit", "name": "resume_cut", "problem": "torus", "stop_at": 10,
         "fit": {"checkpoint_dir": ckpt["cut"], **every}},
        {"kind": "interrupted_fit", "name": "resume_cut_one", "problem": "torus", "stop_at": 10,
         "fit": {"checkpoint_dir": ckpt["cut_for_one"], **every}},
        {"kind": "fit", "name": "resume_continued", "problem": "torus",
         "fit": {"checkpoint_dir": ckpt["cut"], "resume": True, **every}},
    ]
    dw.run(WORLD, jobs, out)
    return out


def _one_process(problem: str, **fit):
    return heatwalk.fit(dw.make_space(problem), dw.make_data(problem), network=dw.NETWORK[problem],
                        **{**dw.FIT, **fit})


def _max_diff(a: dict, b: dict, skip_key_bias: bool = False) -> float:
    """Largest entry difference of two state dicts; optionally without the attention's key bias (see below)."""
    assert a.keys() == b.keys()
    out = 0.0
    for k in a:
        d = (a[k].double() - b[k].double()).abs()
        if skip_key_bias and k.endswith("self_attn.in_proj_bias"):
            third = d.shape[0] // 3
            key_bias = d[third:2 * third]
            # softmax ignores a constant added to every logit, so the exact gradient of the key bias is zero:
            # Adam turns its rounding-level gradient into steps of ±lr, which may differ between the runs (at
            # most steps × lr) and do not change the network's outputs
            assert float(key_bias.max()) <= dw.FIT["steps"] * dw.FIT["lr"]
            d = torch.cat([d[:third], d[2 * third:]])
        out = max(out, float(d.max()))
    return out


def _outputs(model, problem):
    """The network on a fixed batch of noised points: the function the weights stand for."""
    objective = model.objective
    x0 = model.space.take(dw.make_data(problem), slice(0, 64))
    drawn = objective.draw(x0, torch.Generator().manual_seed(21))
    if problem == "torus":
        return objective.scaled_score(model.network, drawn["xt"], drawn["t"])
    if problem == "categories":
        return objective.logits(model.network, drawn["xt"], drawn["t"])
    return objective.raw_outputs(model.network, drawn["xt"], drawn["tau"], None, drawn["roles"])


def _as_tensors(x):
    return x if isinstance(x, tuple) else (x,)


@pytest.mark.parametrize("problem", PROBLEMS)
def test_two_processes_give_the_weights_and_samples_of_one(runs, problem):
    one = _one_process(problem)
    two = heatwalk.load(runs / f"{problem}_2")
    assert two.record["processes"] == WORLD and one.record["processes"] == 1
    # both ranks return the same model
    rank0 = torch.load(runs / f"{problem}_2.rank0.pt", weights_only=True)
    rank1 = torch.load(runs / f"{problem}_2.rank1.pt", weights_only=True)
    assert _max_diff(rank0, rank1) == 0.0
    diff = _max_diff(one.network.state_dict(), two.network.state_dict(), skip_key_bias=True)
    assert diff <= WEIGHT_ATOL, f"{problem}: weights of 1 and 2 processes differ by {diff:.3g}"
    with torch.no_grad():
        out = float((_outputs(one, problem) - _outputs(two, problem)).abs().max())
    assert out <= SAMPLE_ATOL, f"{problem}: network outputs differ by {out:.3g}"
    # the same global losses were computed (the record's mean loss agrees to float32 rounding)
    assert two.record["mean_loss_last_100_steps"] == pytest.approx(one.record["mean_loss_last_100_steps"], rel=1e-5)
    s1 = _as_tensors(one.sample(32, steps=20, seed=7, progress=False))
    s2 = _as_tensors(two.sample(32, steps=20, seed=7, progress=False))
    for a, b in zip(s1, s2):
        if a.dtype.is_floating_point:
            assert float((a - b).abs().max()) <= SAMPLE_ATOL
        else:  # discrete draws: identical unless a probability moved across a uniform draw (none here)
            assert torch.equal(a, b)


@pytest.mark.parametrize("problem", PROBLEMS)
def test_averaged_gradients_equal_the_gradient_of_the_whole_batch(runs, problem):
    """DDP-averaged gradients of the two ranks' shares vs one backward pass of the concatenated batch."""
    from heatwalk.core.objectives import make_objective

    space = dw.make_space(problem)
    objective = make_objective(space)
    torch.manual_seed(5)
    net = objective.default_network(**dw.NETWORK[problem])
    x0 = space.take(dw.make_data(problem), slice(0, 64))
    objective.loss(net, x0, torch.Generator().manual_seed(9)).backward()
    whole = {n: p.grad for n, p in net.named_parameters()}
    averaged = torch.load(runs / f"grad_{problem}.pt", weights_only=True)
    for name, g in whole.items():
        # float32 sums of 64 terms split 32 + 32: relative error a few eps of the largest entry
        scale = float(g.abs().max())
        assert float((averaged[name] - g).abs().max()) <= 1e-5 * scale + 1e-8, name


def test_shares_weigh_rows_so_their_mean_is_the_batch_mean():
    """Without processes: the rank losses of a split batch average to the one-process loss (any world size)."""
    from heatwalk.core.objectives import make_objective
    from heatwalk.core.parallel import Share

    space = dw.make_space("categories")
    objective = make_objective(space)
    torch.manual_seed(5)
    net = objective.default_network(**dw.NETWORK["categories"])
    drawn = objective.draw(dw.make_data("categories")[:61], torch.Generator().manual_seed(2))
    whole = objective.share_loss(net, drawn)
    for world in (2, 3, 7):
        parts = [objective.share_loss(net, drawn, Share(r, world)) for r in range(world)]
        assert float(sum(parts).detach() / world) == pytest.approx(float(whole.detach()), rel=1e-6)


def test_resumed_distributed_run_ends_as_the_uninterrupted_one(runs):
    full = heatwalk.load(runs / "resume_full")
    continued = heatwalk.load(runs / "resume_continued")
    assert continued.record["resumed_from_step"] == 10 and full.record["resumed_from_step"] == 0
    assert _max_diff(full.network.state_dict(), continued.network.state_dict()) == 0.0


def test_a_two_process_checkpoint_resumes_in_one_process(runs, tmp_path):
    """The checkpoint does not depend on the number of processes that wrote it."""
    folder = tmp_path / "ckpt"
    shutil.copytree(runs / "ckpt_cut_for_one", folder)
    resumed = _one_process("torus", checkpoint_dir=folder, checkpoint_every=10, resume=True)
    assert resumed.record["resumed_from_step"] == 10
    full = heatwalk.load(runs / "resume_full")
    assert _max_diff(full.network.state_dict(), resumed.network.state_dict()) <= WEIGHT_ATOL


def test_batch_smaller_than_the_processes_is_refused():
    from heatwalk.core.parallel import Share
    from heatwalk.core.training import _fit, _Settings

    settings = _Settings(**{**{k: dw.FIT[k] for k in ("steps", "lr", "ema_decay", "seed", "progress")},
                            "batch_size": 1, "network": None, "time_range": None, "checkpoint_dir": None,
                            "checkpoint_every": 10, "resume": False, "labels": None, "label_dropout": 0.1,
                            "inpainting": False})
    with pytest.raises(heatwalk.InputError, match="smaller than the number of processes 2"):
        _fit(dw.make_space("torus"), dw.make_data("torus"), Share(0, 2), torch.device("cpu"), settings)


TORCHRUN_SCRIPT = """
import sys, torch
sys.path.insert(0, sys.argv[2])
import heatwalk
import distributed_worker as dw
torch.set_num_threads(1)
model = heatwalk.fit(dw.make_space("torus"), dw.make_data("torus"), network=dw.NETWORK["torus"], **dw.FIT)
if heatwalk.is_main_process():
    model.save(sys.argv[1])
"""


def test_torchrun_starts_a_data_parallel_fit(tmp_path):
    """The standard launcher: torchrun (torch.distributed.run), 2 processes on this machine, loopback only."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    script = tmp_path / "fit.py"
    script.write_text(TORCHRUN_SCRIPT)
    env = {**os.environ, "GLOO_SOCKET_IFNAME": "lo"}
    port = dw.free_ports(1)[0]
    subprocess.run([sys.executable, "-m", "torch.distributed.run", "--nnodes", "1", "--nproc-per-node", str(WORLD),
                    "--master-addr", dw.LOOPBACK, "--master-port", str(port), str(script), str(tmp_path / "model"),
                    str(Path(dw.__file__).parent)], check=True, env=env, capture_output=True, timeout=600)
    two = heatwalk.load(tmp_path / "model")
    assert two.record["processes"] == WORLD
    one = _one_process("torus")
    assert _max_diff(one.network.state_dict(), two.network.state_dict()) <= WEIGHT_ATOL
