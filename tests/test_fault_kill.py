"""Fault test: a fit killed with SIGKILL while writing a checkpoint, then while writing the model, resumes to the
weights of an uninterrupted run and leaves no temporaries behind."""

import os
import signal
import subprocess
import sys

import torch

import heatwalk
from heatwalk.spaces import Torus

# the child fits a tiny torus model with a checkpoint after every step; to make the kill land inside a write
# (not between writes, where it would prove nothing), it can stop half-way through writing the checkpoint of
# one step (the temporary file truncated to half its bytes, as a kill during the write leaves it), or after the
# weights of the model folder are written but before the folder is renamed into place, and wait to be killed
CHILD = r"""
import os, sys, time
import torch
torch.set_num_threads(1)
import heatwalk
from heatwalk.core import model as model_module
from heatwalk.spaces import Torus

ckpt, out, kill_at_step, kill_in_model_save, resume = sys.argv[1], sys.argv[2], *map(int, sys.argv[3:6])
real_save, real_weights = torch.save, model_module.write_weights

def save_half_then_wait(obj, f, *args, **kwargs):
    real_save(obj, f, *args, **kwargs)
    if isinstance(obj, dict) and obj.get("step") == kill_at_step:
        os.truncate(f, os.path.getsize(f) // 2)
        print("WRITING", flush=True)
        time.sleep(600)

def weights_then_wait(folder, net):
    path = real_weights(folder, net)
    print("WRITING", flush=True)
    time.sleep(600)
    return path

torch.save = save_half_then_wait
if kill_in_model_save:
    model_module.write_weights = weights_then_wait
space = Torus(2)
x = space.random_uniform(40, torch.Generator().manual_seed(0))
model = heatwalk.fit(space, x, steps=20, batch_size=16, network={"hidden": 8, "depth": 2}, progress=False,
                     checkpoint_dir=ckpt, checkpoint_every=1, resume=bool(resume))
model.save(out, overwrite=True)
print("DONE", model.record["resumed_from_step"], flush=True)
"""


def _run(ckpt, out, kill_at_step=0, kill_in_model_save=0, resume=0):
    """Run the child; kill it with SIGKILL when it reports being inside a write. Returns (stdout lines, stderr)."""
    args = [sys.executable, "-c", CHILD, str(ckpt), str(out), str(kill_at_step), str(kill_in_model_save), str(resume)]
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    lines = []
    for line in proc.stdout:
        lines.append(line.strip())
        if line.startswith("WRITING"):
            os.kill(proc.pid, signal.SIGKILL)
            break
    err = proc.stderr.read()
    proc.wait(timeout=600)
    return lines, err, proc.returncode


def _temporaries(*folders):
    return sorted(p.name for f in folders for p in f.iterdir() if p.name.endswith(".tmp"))


def test_sigkill_during_checkpoint_and_model_writes_then_resume(tmp_path):
    ckpt, results = tmp_path / "ckpt", tmp_path / "results"
    results.mkdir()
    out = results / "model"

    lines, err, code = _run(ckpt, out, kill_at_step=7)
    assert code == -signal.SIGKILL and lines == ["WRITING"], err
    left = _temporaries(ckpt)
    assert len(left) == 1 and left[0].startswith(".checkpoint.pt.")  # the half-written temporary
    assert torch.load(ckpt / "checkpoint.pt", weights_only=True)["step"] == 6  # the last complete checkpoint

    lines, err, code = _run(ckpt, out, kill_in_model_save=1, resume=1)
    assert code == -signal.SIGKILL and lines == ["WRITING"], err
    assert "removed the file" in err and "a temporary left by an interrupted write" in err  # the stale one
    assert _temporaries(ckpt) == []
    left = _temporaries(results)
    assert len(left) == 1 and left[0].startswith(".model.") and not out.exists()  # the unfinished model folder

    lines, err, code = _run(ckpt, out, resume=1)
    assert code == 0 and lines == ["DONE 20"], err  # the finished run resumed: the finished model
    assert "removed the folder" in err
    assert _temporaries(ckpt, results) == [] and sorted(os.listdir(results)) == ["model"]

    # the same fit, never interrupted, in this process (the suite runs torch on one thread, as the child)
    space = Torus(2)
    x = space.random_uniform(40, torch.Generator().manual_seed(0))
    whole = heatwalk.fit(space, x, steps=20, batch_size=16, network={"hidden": 8, "depth": 2}, progress=False)
    resumed = heatwalk.load(out)
    for k, v in whole.network.state_dict().items():
        assert torch.equal(resumed.network.state_dict()[k], v), k  # bit for bit
