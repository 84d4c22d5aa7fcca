"""Model folders: weights without pickle, model.json checked before anything is built, crafted files refused."""

import json
import os
import pickle
import stat
import struct

import pytest
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core import model_files
from heatwalk.spaces import Torus


@pytest.fixture(scope="module")
def model():
    space = Torus(2)
    x = space.random_uniform(64, torch.Generator().manual_seed(0))
    # the MLP: the parameter arithmetic and tensor names below are its own
    return heatwalk.fit(space, x, steps=5, batch_size=16, network={"hidden": 8, "depth": 2, "residual": False},
                        progress=False)


@pytest.fixture
def folder(tmp_path, model):
    return model.save(tmp_path / "m")


def _edit(folder, change):
    cfg = json.loads((folder / "model.json").read_text())
    change(cfg)
    (folder / "model.json").write_text(json.dumps(cfg))


def _one_line(e):
    text = str(e.value)
    assert "\n" not in text, text
    assert "weights_only" not in text, text  # never torch's advice to load with weights_only=False
    return text


def test_weights_are_written_as_safetensors_without_pickle(folder, model):
    assert sorted(os.listdir(folder)) == ["losses.csv", "model.json", "weights.safetensors"]
    umask = os.umask(0)
    os.umask(umask)
    for name in ("model.json", "weights.safetensors"):  # the umask's modes, as open() gives (POSIX)
        assert stat.S_IMODE(os.stat(folder / name).st_mode) == 0o666 & ~umask, name
    assert stat.S_IMODE(os.stat(folder).st_mode) == 0o777 & ~umask
    raw = (folder / "weights.safetensors").read_bytes()
    # the safetensors layout (its published specification): u64 little-endian header length N, N bytes of
    # JSON {name: {dtype, shape, data_offsets}}, then the tensor bytes; parsed here without the library
    (n,) = struct.unpack("<Q", raw[:8])
    header = json.loads(raw[8:8 + n])
    state = model.network.state_dict()
    assert sorted(k for k in header if k != "__metadata__") == sorted(state)
    for k, v in state.items():
        assert header[k]["dtype"] == "F32" and header[k]["shape"] == list(v.shape)
        a, b = header[k]["data_offsets"]
        got = torch.frombuffer(bytearray(raw[8 + n + a:8 + n + b]), dtype=torch.float32).reshape(v.shape)
        assert torch.equal(got, v)
    assert b"\x80" != raw[:1]  # not a pickle stream (pickle protocol 2+ starts with 0x80)
    loaded = heatwalk.load(folder)
    x1 = model.sample(6, steps=5, progress=False)
    x2 = loaded.sample(6, steps=5, progress=False)
    assert torch.equal(x1, x2)


def test_folders_with_the_old_weights_pt_still_load(folder, model):
    (folder / "weights.safetensors").unlink()
    torch.save(model.network.state_dict(), folder / "weights.pt")
    loaded = heatwalk.load(folder)
    for k, v in model.network.state_dict().items():
        assert torch.equal(loaded.network.state_dict()[k], v)


class _Payload:
    def __reduce__(self):
        return (os.system, (f"touch {os.environ.get('HW_MARKER', '/nonexistent/marker')}",))


def test_a_crafted_pickle_is_refused_in_one_line_and_never_runs(folder, tmp_path, monkeypatch):
    marker = tmp_path / "ran"
    monkeypatch.setenv("HW_MARKER", str(marker))
    (folder / "weights.safetensors").unlink()
    with open(folder / "weights.pt", "wb") as f:
        pickle.dump({"net.0.weight": _Payload()}, f)
    with pytest.raises(InputError) as e:
        heatwalk.load(folder)
    assert "pickled code, which heatwalk never runs" in _one_line(e)
    assert not marker.exists()


@pytest.mark.parametrize("edit, message", [
    (lambda c: c.pop("network"), "key 'network' is missing"),
    (lambda c: c.update(space=[1, 2]), "key 'space' must be an object"),
    (lambda c: c["network"].update(config="wide"), "key 'network.config' must be an object"),
    (lambda c: c["network"]["config"].update(hidden="8"), "key 'network.config.hidden' must be an integer"),
    (lambda c: c["network"]["config"].update(hidden=True), "key 'network.config.hidden' must be an integer"),
    (lambda c: c["network"]["config"].update(depth=10**9), r"key 'network.config.depth' must be an integer in \[1, "
                                                          r"1000\]"),
    (lambda c: c["network"]["config"].update(width=3), "unknown key 'network.config.width'"),
    (lambda c: c.update(extra=1), "unknown key 'extra'"),
    (lambda c: c["space"].update(n="two"), "key 'space'"),
    (lambda c: c["space"].update(colour=1), "key 'space'.*colour"),
    (lambda c: c["objective"]["schedule"].update(t_min=-1), "key 'objective'.*time range"),
    (lambda c: c.update(format_version=99), "format_version 99"),
])
def test_model_json_is_checked_against_its_schema(folder, edit, message):
    _edit(folder, edit)
    with pytest.raises(InputError, match=message) as e:
        heatwalk.load(folder)
    _one_line(e)


def test_a_residual_network_option_that_is_not_a_boolean_is_refused(tmp_path):
    space = Torus(2)
    x = space.random_uniform(64, torch.Generator().manual_seed(0))
    m = heatwalk.fit(space, x, steps=2, batch_size=16, progress=False,
                     network={"hidden": 8, "depth": 1, "residual": True, "time_skip": True})
    folder = m.save(tmp_path / "r")
    assert heatwalk.load(folder).network.config()["time_skip"] is True
    _edit(folder, lambda c: c["network"]["config"].update(time_skip="yes"))
    with pytest.raises(InputError, match="key 'network.config.time_skip' must be true or false") as e:
        heatwalk.load(folder)
    _one_line(e)


def test_model_json_top_level_list_and_deep_nesting(folder):
    (folder / "model.json").write_text("[1, 2]")
    with pytest.raises(InputError, match="top level must be a JSON object"):
        heatwalk.load(folder)
    (folder / "model.json").write_text("[" * 100000 + "]" * 100000)  # a RecursionError for a recursive parser
    with pytest.raises(InputError, match="nested more than 32 levels"):
        heatwalk.load(folder)
    (folder / "model.json").write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        heatwalk.load(folder)


def test_an_edited_width_is_refused_before_any_network_memory(folder, monkeypatch):
    devices = []
    real = model_files.build_network

    def spy(name, config):
        devices.append(torch.empty(0).device.type)  # the device new tensors would get in this call
        return real(name, config)

    monkeypatch.setattr(model_files, "build_network", spy)
    _edit(folder, lambda c: c["network"]["config"].update(hidden=20000))  # 4e8 parameters if it were built
    with pytest.raises(InputError, match=r"tensor 'net.0.weight' has shape \[8, 21\].*needs \[20000, 21\]"):
        heatwalk.load(folder)
    assert devices == ["meta"]


def test_a_network_beyond_the_size_cap_is_refused(folder):
    _edit(folder, lambda c: c["network"]["config"].update(hidden=2**24, depth=4))
    # H = 2^24 hidden units, 4 layers: (21 + 1) H + 3 (H^2 + H) + 2 H + 2 = 8.44e14 parameters (arithmetic)
    h = 2**24
    assert f"{22 * h + 3 * (h * h + h) + 2 * h + 2:.3g}" == "8.44e+14"
    with pytest.raises(InputError, match=r"would have 8\.44e\+14 parameters, more than the 1e\+09"):
        heatwalk.load(folder)


def test_weights_that_are_not_finite_are_refused(folder):
    from safetensors.torch import load_file, save_file

    state = load_file(folder / "weights.safetensors")
    state["net.0.weight"][0, 0] = float("nan")
    save_file(state, folder / "weights.safetensors")
    with pytest.raises(InputError, match="'net.0.weight' has 1 NaN or infinite entries: the weights are corrupted"):
        heatwalk.load(folder)


def test_a_damaged_weights_file_is_refused(folder):
    (folder / "weights.safetensors").write_bytes(b"\xff" * 40)
    with pytest.raises(InputError, match="not a readable safetensors weights file") as e:
        heatwalk.load(folder)
    _one_line(e)


def test_a_network_that_does_not_fit_its_space_is_refused_at_load(folder):
    # the weights fit the network of model.json, but Torus(3) gives 6 features where the network takes 4
    _edit(folder, lambda c: c["space"].update(n=3))
    with pytest.raises(InputError, match=r"the network does not fit the space Torus\(n=3\)"):
        heatwalk.load(folder)


def test_a_crafted_checkpoint_is_refused_in_one_line(tmp_path, monkeypatch):
    marker = tmp_path / "ran"
    monkeypatch.setenv("HW_MARKER", str(marker))
    ckpt = tmp_path / "ckpt"
    ckpt.mkdir()
    torch.save({"run_config": "{}", "step": _Payload()}, ckpt / "checkpoint.pt")
    space = Torus(1)
    x = space.random_uniform(8, torch.Generator().manual_seed(0))
    with pytest.raises(InputError, match="not a heatwalk checkpoint made of plain tensors") as e:
        heatwalk.fit(space, x, steps=2, batch_size=4, network={"hidden": 4, "depth": 1}, progress=False,
                     checkpoint_dir=ckpt, resume=True)
    _one_line(e)
    assert not marker.exists()
