"""Devices: every entry point takes ``device`` and returns tensors there; nothing is made on the wrong device.

On a machine without a GPU, a CPU run cannot catch a tensor made on the CPU where it should have been made on
the device of the inputs (the bug only shows on a GPU). So the source is checked instead: every tensor factory
call in spaces/, kernels/, samplers/ and heatwalk/core passes ``device=`` (or derives from an input: the
``*_like`` functions, ``x.new_*``), or is marked ``# cpu: reason`` on its lines or the line just above
(tables built once on the CPU and served per device, values parsed from user input and moved later, sampling
grids moved by the samplers). Module-level constants are exempt: they are served by
``heatwalk.kernels.constants.on`` or ``.to(x.device)`` where they are used. The CUDA tests below run where a
GPU is present and are skipped with the reason otherwise.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
import torch

import heatwalk
from heatwalk.core.devices import resolve_device, set_threads
from heatwalk.spaces import SO3, Categories, Euclidean, Product, Simplex, Sphere, Torus

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = ("spaces", "kernels", "samplers", "heatwalk/core")
FACTORIES = {"randn", "rand", "randint", "randperm", "zeros", "ones", "full", "empty", "tensor", "as_tensor",
             "arange", "eye", "linspace", "logspace", "normal", "Generator"}
HAS_CUDA = torch.cuda.is_available()
needs_cuda = pytest.mark.skipif(not HAS_CUDA, reason="no CUDA GPU on this machine (torch.cuda.is_available() "
                                                     "is False): the CUDA checks run where one is present")


def _unplaced_factory_calls(path: Path, root: Path = ROOT) -> list[str]:
    src = path.read_text()
    lines = src.splitlines()
    tree = ast.parse(src)
    module_level = {id(n) for node in tree.body if not isinstance(node, (ast.FunctionDef, ast.ClassDef))
                    for n in ast.walk(node)}
    found = []
    for n in ast.walk(tree):
        if not (isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute) and isinstance(n.func.value, ast.Name)
                and n.func.value.id == "torch" and n.func.attr in FACTORIES):
            continue
        if any(k.arg == "device" for k in n.keywords) or id(n) in module_level:
            continue
        if any("# cpu:" in lines[i - 1] for i in range(max(1, n.lineno - 1), n.end_lineno + 1)):
            continue
        found.append(f"{path.relative_to(root)}:{n.lineno}: {lines[n.lineno - 1].strip()}")
    return found


def test_every_tensor_factory_states_its_device():
    files = [p for folder in FOLDERS for p in sorted((ROOT / folder).rglob("*.py"))]
    assert len(files) > 30  # the folders were found
    bad = [line for p in files for line in _unplaced_factory_calls(p)]
    assert not bad, "tensor factories without device= (pass device=x.device, or mark '# cpu: why'):\n" + "\n".join(bad)


def test_the_source_check_finds_a_missing_device(tmp_path):
    """The check above can fail: an unmarked factory without device= inside a function is reported, and only it."""
    (tmp_path / "x.py").write_text("import torch\n\nTABLE = torch.zeros(2)\n\n\ndef f(x):\n"
                                   "    a = torch.zeros_like(x)\n    # cpu: parsed input\n    b = torch.tensor([1.0])\n"
                                   "    c = torch.ones(3, device=x.device)\n    return x + torch.zeros(3) + a + b + c\n")
    # (line 11: the marker of line 8 covers line 9 only)
    found = _unplaced_factory_calls(tmp_path / "x.py", root=tmp_path)
    assert found == ["x.py:11: return x + torch.zeros(3) + a + b + c"]


# ----- names of devices -----------------------------------------------------------------------------------
def test_resolve_device_names():
    assert resolve_device(None) == torch.device("cpu")
    assert resolve_device("cpu") == torch.device("cpu")
    assert resolve_device(torch.device("cpu")) == torch.device("cpu")
    assert resolve_device("auto") == (torch.device("cuda", 0) if HAS_CUDA else torch.device("cpu"))
    with pytest.raises(heatwalk.InputError, match="MPS has no float64"):
        resolve_device("mps")
    with pytest.raises(heatwalk.InputError, match="device must be one of cpu, cuda, mps, auto or cuda:N"):
        resolve_device("tpu")
    with pytest.raises(heatwalk.InputError, match="device must be one of"):
        resolve_device("cuda:x")


@pytest.mark.skipif(HAS_CUDA, reason="checks the error of a machine without a GPU")
def test_cuda_without_a_gpu_is_a_clear_error():
    with pytest.raises(heatwalk.InputError, match=r"no CUDA GPU is available.*use cpu"):
        resolve_device("cuda")
    with pytest.raises(heatwalk.InputError, match="no CUDA GPU"):
        heatwalk.fit(Torus(1), torch.zeros(4, 1), steps=1, device="cuda:0", progress=False)


def test_threads_are_set_and_restored():
    before = torch.get_num_threads()
    assert set_threads(None) == before and torch.get_num_threads() == before
    try:
        assert set_threads(2) == before and torch.get_num_threads() == 2
    finally:
        torch.set_num_threads(before)
    with pytest.raises(heatwalk.InputError, match="threads must be a positive integer, got 0"):
        set_threads(0)
    x = Torus(1).prior_sample(32, torch.Generator().manual_seed(0))
    heatwalk.fit(Torus(1), x, steps=2, batch_size=8, threads=2, progress=False, network={"hidden": 8, "depth": 1})
    assert torch.get_num_threads() == before


# ----- every entry point on a device ------------------------------------------------------------------------
def _small_fit(space, data, device):
    net = {"d_model": 8, "n_layers": 1, "n_heads": 2} if isinstance(space, Categories) else {"hidden": 16, "depth": 1}
    return heatwalk.fit(space, data, steps=3, batch_size=16, seed=1, progress=False, network=net, device=device)


def _data(space, n=64):
    """Points of the space: uniform where there is a uniform law (an absorbing prior is all masks), else the prior."""
    g = torch.Generator().manual_seed(4)
    try:
        return space.random_uniform(n, g)
    except heatwalk.InputError:
        return space.prior_sample(n, g)


def _on(x, device):
    xs = x if isinstance(x, tuple) else (x,)
    return all(v.device.type == torch.device(device).type for v in xs)


DEVICES = ["cpu"] + (["cuda"] if HAS_CUDA else [])


@pytest.mark.parametrize("device", DEVICES)
@pytest.mark.parametrize("space", [Torus(2), Sphere(2), SO3(), Simplex(3), Euclidean(2), Categories(3, 4),
                                   Product(Torus(1), Categories(3, 2))], ids=repr)
def test_entry_points_take_a_device_and_return_tensors_there(space, device):
    model = _small_fit(space, _data(space), device)
    assert model.device.type == device and model.record["device"].startswith(device)
    x = model.sample(8, steps=3, seed=2, progress=False, device=device)
    assert _on(x, device)
    lp = model.log_prob(_data(space, 4), device=device, **({} if isinstance(space, (Categories, Product))
                                                          else {"method": "rk4", "steps": 2}))
    assert _on(lp["log_prob"], device) and lp["log_prob"].dtype == torch.float64


def test_elbo_and_generator_device():
    space = Categories(3, 4)
    model = _small_fit(space, _data(space), "cpu")
    est = model.elbo(_data(space, 4), n_time_samples=4, device="cpu")
    assert _on(est.nats, "cpu")
    g = torch.Generator().manual_seed(5)
    a = model.sample(6, steps=3, generator=g, progress=False, device="cpu")
    b = model.sample(6, steps=3, seed=5, progress=False, device="cpu")
    assert torch.equal(a, b)  # a seed is a generator made on the sampling device


# ----- CUDA (skipped without a GPU) -------------------------------------------------------------------------
@needs_cuda
@pytest.mark.parametrize("space", [Torus(2), Sphere(2), Sphere(3), SO3(), Simplex(3), Euclidean(2)], ids=repr)
def test_cuda_kernels_are_float64_and_agree_with_the_cpu(space):
    g = torch.Generator().manual_seed(0)
    x0 = space.prior_sample(256, g)
    t = torch.exp(torch.empty(256, dtype=torch.float64).uniform_(-9, 1, generator=g))
    xt = space.sample_forward(x0, t, g)
    lk, sc = space.log_kernel_and_score(xt, x0, t)
    lk_c, sc_c = space.log_kernel_and_score(xt.cuda(), x0.cuda(), t.cuda())
    assert lk_c.dtype == torch.float64 and sc_c.dtype == torch.float64 and lk_c.is_cuda
    # the same float64 formulas on two devices: agreement to rounding (1e-10 relative, common practice)
    assert torch.allclose(lk_c.cpu(), lk, rtol=1e-10, atol=1e-10)
    assert torch.allclose(sc_c.cpu(), sc, rtol=1e-8, atol=1e-8)
    gc = torch.Generator(device="cuda").manual_seed(1)
    assert space.sample_forward(x0.cuda(), t.cuda(), gc).is_cuda


@needs_cuda
def test_cuda_generator_mismatch_is_refused():
    model = _small_fit(Torus(1), _data(Torus(1)), "cuda")
    with pytest.raises(heatwalk.InputError, match="generator is on cpu"):
        model.sample(4, steps=2, generator=torch.Generator(), progress=False)
