"""Training data that is not held in memory: memory-mapped arrays, Datasets and iterables of batches."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest
import torch

import heatwalk
from heatwalk.core.data_source import VALIDATION_CHUNK
from heatwalk.io.arrays import open_array
from heatwalk.spaces import Categories, Product, Torus

FIT = dict(steps=12, batch_size=32, seed=2, progress=False, network={"hidden": 16, "depth": 2})


def _angles(n: int, seed: int = 0) -> np.ndarray:
    g = np.random.default_rng(seed)
    return np.mod(g.normal([0.5, -1.0], 0.4, size=(n, 2)) + np.pi, 2 * np.pi) - np.pi


def _weights(model):
    return {k: v.clone() for k, v in model.network.state_dict().items()}


def _same(a, b) -> bool:
    return a.keys() == b.keys() and all(torch.equal(a[k], b[k]) for k in a)


def test_memory_mapped_array_trains_exactly_as_the_array_in_memory(tmp_path):
    x = _angles(3000)
    np.save(tmp_path / "a.npy", x)
    in_memory = heatwalk.fit(Torus(2), x, **FIT)
    mapped = heatwalk.fit(Torus(2), open_array(tmp_path / "a.npy"), **FIT)
    assert isinstance(open_array(tmp_path / "a.npy"), np.memmap)
    assert _same(_weights(in_memory), _weights(mapped)) and mapped.record["n_data"] == 3000


def test_npz_members_and_products_of_mapped_arrays(tmp_path):
    x = _angles(500)
    codes = (x[:, :1] > 0).astype(np.int64).repeat(2, axis=1)
    np.savez(tmp_path / "d.npz", angles=x[:, :1], codes=codes)
    space = Product(Torus(1), Categories(2, 2, process="uniform"))
    mapped = (open_array(tmp_path / "d.npz", "angles"), open_array(tmp_path / "d.npz", "codes"))
    a = heatwalk.fit(space, mapped, **FIT)
    b = heatwalk.fit(space, (x[:, :1], codes), **FIT)
    assert _same(_weights(a), _weights(b))


def test_compressed_archives_and_other_files_are_refused_with_the_reason(tmp_path):
    np.savez_compressed(tmp_path / "c.npz", x=_angles(10))
    with pytest.raises(heatwalk.InputError, match="is compressed .* cannot be memory-mapped"):
        open_array(tmp_path / "c.npz")
    np.savez(tmp_path / "two.npz", x=_angles(10), y=_angles(10))
    with pytest.raises(heatwalk.InputError, match=r"holds 2 arrays \['x', 'y'\]; name the one"):
        open_array(tmp_path / "two.npz")
    (tmp_path / "t.csv").write_text("1,2\n")
    with pytest.raises(heatwalk.InputError, match="expected a .npy or .npz file"):
        open_array(tmp_path / "t.csv")


def test_a_bad_row_of_a_mapped_array_is_named_by_its_row_in_the_file(tmp_path):
    n = VALIDATION_CHUNK + 1000
    x = _angles(n)
    x[VALIDATION_CHUNK + 17, 1] = 40.0  # far outside [-2π, 2π]: the wrong unit
    np.save(tmp_path / "bad.npy", x)
    with pytest.raises(heatwalk.InputError, match=rf"row {VALIDATION_CHUNK + 17}: angles") as err:
        heatwalk.fit(Torus(2), open_array(tmp_path / "bad.npy"), **FIT)
    assert err.value.row == VALIDATION_CHUNK + 17


def test_a_map_style_dataset_trains_as_its_tensor():
    x = torch.as_tensor(_angles(800))
    a = heatwalk.fit(Torus(2), torch.utils.data.TensorDataset(x), **FIT)
    b = heatwalk.fit(Torus(2), x, **FIT)
    assert _same(_weights(a), _weights(b))


def _loader(x, seed=4):
    return torch.utils.data.DataLoader(torch.utils.data.TensorDataset(torch.as_tensor(x)), batch_size=32,
                                       shuffle=True, generator=torch.Generator().manual_seed(seed))


def test_a_dataloader_is_cycled_and_a_spent_iterator_is_an_error():
    x = _angles(100)  # 4 batches per pass: 12 steps cycle it three times
    model = heatwalk.fit(Torus(2), _loader(x), **FIT)
    assert model.record["n_data"] is None and model.record["steps"] == 12
    batches = iter([torch.as_tensor(x[:32])] * 5)
    with pytest.raises(heatwalk.InputError, match="ran out after 5 batches"):
        heatwalk.fit(Torus(2), batches, **FIT)
    with pytest.raises(heatwalk.InputError, match="labels= needs the data points themselves"):
        heatwalk.fit(Torus(2), _loader(x), labels=[0] * 100, **FIT)


def test_a_bad_batch_is_named():
    x = _angles(64)
    x[40, 0] = np.nan
    with pytest.raises(heatwalk.InputError, match="data batch 2: angles: row 8 contains NaN"):
        heatwalk.fit(Torus(2), iter([torch.as_tensor(x[:32]), torch.as_tensor(x[32:])]), **FIT)


def test_a_stream_run_resumes_to_the_uninterrupted_result(tmp_path, monkeypatch):
    from heatwalk.core import training

    x = _angles(100)
    full = heatwalk.fit(Torus(2), _loader(x), checkpoint_dir=tmp_path / "a", checkpoint_every=6, **FIT)
    original = training._checkpoint

    class Stop(Exception):
        pass

    def stop_at_6(path, run_config, step, run, losses):
        original(path, run_config, step, run, losses)
        if step == 6:
            raise Stop

    monkeypatch.setattr(training, "_checkpoint", stop_at_6)
    with pytest.raises(Stop):
        heatwalk.fit(Torus(2), _loader(x), checkpoint_dir=tmp_path / "b", checkpoint_every=6, **FIT)
    monkeypatch.setattr(training, "_checkpoint", original)
    resumed = heatwalk.fit(Torus(2), _loader(x), checkpoint_dir=tmp_path / "b", checkpoint_every=6, resume=True,
                           **FIT)
    assert resumed.record["resumed_from_step"] == 6
    assert _same(_weights(full), _weights(resumed))


MEMORY_SCRIPT = textwrap.dedent("""
    import sys, threading, time
    import numpy as np, torch
    torch.set_num_threads(1)
    import heatwalk
    from heatwalk.io.arrays import open_array
    from heatwalk.spaces import Torus

    def anon():  # private anonymous memory of this process (bytes): what loading an array costs
        for line in open("/proc/self/status"):
            if line.startswith("RssAnon:"):
                return int(line.split()[1]) * 1024

    mode, path = sys.argv[1], sys.argv[2]
    net = {"hidden": 32, "depth": 2}
    heatwalk.fit(Torus(2), torch.zeros(64, 2, dtype=torch.float64), steps=2, batch_size=32, progress=False,
                 network=net)  # allocate what any fit allocates
    peak, done = [0], [False]

    def watch():
        while not done[0]:
            peak[0] = max(peak[0], anon())
            time.sleep(0.001)

    base = anon()
    thread = threading.Thread(target=watch)
    thread.start()
    data = open_array(path) if mode == "mapped" else np.load(path)
    heatwalk.fit(Torus(2), data, steps=20, batch_size=256, progress=False, network=net)
    done[0] = True
    thread.join()
    print(max(peak[0], anon()) - base)
""")


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads RssAnon from /proc (Linux)")
def test_a_million_row_mapped_file_trains_without_being_loaded(tmp_path):
    """Peak growth of the process's anonymous memory during fit: mapped vs loaded (16 MB of angles).

    Bound: a mapped fit grows by less than the file's size (it holds a validation chunk of 65536 rows and a
    batch); the loaded fit, run as the control, grows by more than the file (it holds the array and copies).
    """
    n = 10**6
    path = tmp_path / "angles.npy"
    arr = np.lib.format.open_memmap(path, mode="w+", dtype=np.float64, shape=(n, 2))
    arr[:] = _angles(n)
    arr.flush()
    del arr
    size = n * 2 * 8
    growth = {mode: int(subprocess.run([sys.executable, "-c", MEMORY_SCRIPT, mode, str(path)], check=True,
                                       capture_output=True, text=True).stdout.split()[-1])
              for mode in ("mapped", "loaded")}
    assert growth["loaded"] > size, growth  # the measurement sees a whole load
    assert growth["mapped"] < size, growth


def test_a_product_is_told_by_its_type_not_by_an_attribute_named_factors():
    # data_source asks isinstance(space, Product): a space that merely has a `factors` attribute is one space
    from heatwalk.core.data_source import BatchStream, RowReader

    class Labelled(Torus):
        factors = ("not", "a", "product")

    rows = torch.utils.data.TensorDataset(torch.as_tensor(_angles(10)))
    reader = RowReader(Labelled(2), rows, torch.device("cpu"))
    assert not reader.product and reader.batch(torch.tensor([3, 1])).shape == (2, 2)
    stream = BatchStream(Labelled(2), [torch.as_tensor(_angles(4))], torch.device("cpu"))
    assert not stream.product and stream.next().shape == (4, 2)
    product = Product(Torus(1), Categories(3, 2))
    assert RowReader(product, (np.zeros((5, 1)), np.zeros((5, 2), dtype=np.int64)), torch.device("cpu")).product
