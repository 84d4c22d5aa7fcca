"""Resuming safely: data fingerprints, nothing to resume, finished runs, SIGTERM handled as SIGINT."""

import os
import signal

import pytest
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core import training
from heatwalk.core.interrupts import Interrupted, exit_status, terminate_as_interrupt
from heatwalk.notices import HeatwalkWarning
from heatwalk.spaces import Torus

SPACE = Torus(2)
SETTINGS = dict(steps=30, batch_size=16, network={"hidden": 8, "depth": 2}, progress=False, checkpoint_every=10)


def _data(seed=0, n=40):
    return SPACE.random_uniform(n, torch.Generator().manual_seed(seed))


def _same_weights(a, b):
    sa, sb = a.network.state_dict(), b.network.state_dict()
    return sa.keys() == sb.keys() and all(torch.equal(sa[k], sb[k]) for k in sa)


@pytest.fixture(scope="module")
def uninterrupted():
    return heatwalk.fit(SPACE, _data(), **SETTINGS)


def test_resume_with_other_data_of_the_same_size_is_refused(tmp_path):
    heatwalk.fit(SPACE, _data(0), checkpoint_dir=tmp_path, **{**SETTINGS, "steps": 10})
    with pytest.raises(InputError, match=r"cannot resume: it was made with different data \(40 points in both, but "
                                         r"their contents differ\)"):
        heatwalk.fit(SPACE, _data(1), checkpoint_dir=tmp_path, resume=True, **{**SETTINGS, "steps": 10})
    # other settings are named
    with pytest.raises(InputError, match="made by a different run \\(differs in lr\\)"):
        heatwalk.fit(SPACE, _data(0), checkpoint_dir=tmp_path, resume=True, lr=1e-3, **{**SETTINGS, "steps": 10})


def test_the_fingerprint_is_a_hash_of_the_points_and_labels():
    x = _data(0)
    a = training.data_fingerprint(x)
    assert a == training.data_fingerprint(x.clone())
    y = x.clone()
    y[17, 1] = torch.nextafter(y[17, 1], torch.tensor(10.0, dtype=torch.float64))  # one bit of one point
    assert training.data_fingerprint(y)["sha256"] != a["sha256"] and training.data_fingerprint(y)["n_points"] == 40
    labels = torch.zeros(40, dtype=torch.int64)
    assert training.data_fingerprint(x, labels) != a


def test_resume_with_no_checkpoint_warns_and_starts_afresh(tmp_path, uninterrupted):
    with pytest.warns(HeatwalkWarning, match="nothing to resume: no checkpoint in .*; training starts from step 0"):
        model = heatwalk.fit(SPACE, _data(), checkpoint_dir=tmp_path / "new", resume=True, **SETTINGS)
    assert model.record["resumed_from_step"] == 0 and _same_weights(model, uninterrupted)


def test_a_finished_run_resumed_returns_the_finished_model(tmp_path, uninterrupted):
    first = heatwalk.fit(SPACE, _data(), checkpoint_dir=tmp_path, **SETTINGS)
    again = heatwalk.fit(SPACE, _data(), checkpoint_dir=tmp_path, resume=True, **SETTINGS)
    assert again.record["resumed_from_step"] == 30
    assert again.record["mean_loss_last_100_steps"] == first.record["mean_loss_last_100_steps"] \
        == uninterrupted.record["mean_loss_last_100_steps"]
    assert _same_weights(again, uninterrupted)


def test_a_checkpoint_folder_that_is_a_file_is_refused(tmp_path):
    f = tmp_path / "ckpt"
    f.write_text("x")
    with pytest.raises(InputError, match="checkpoint folder .* is a file, not a folder"):
        heatwalk.fit(SPACE, _data(), checkpoint_dir=f, **SETTINGS)


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_a_signal_stops_at_the_end_of_the_step_with_a_checkpoint(tmp_path, monkeypatch, uninterrupted, signum):
    real, calls = training.check_finite_loss, []

    def signal_at_step_13(value, step, lr):
        calls.append(step)
        if step == 13:  # mid-step (after the loss, before its checkpoint time): the signal is only recorded
            os.kill(os.getpid(), signum)
        return real(value, step, lr)

    monkeypatch.setattr(training, "check_finite_loss", signal_at_step_13)
    with pytest.raises(Interrupted) as e:
        heatwalk.fit(SPACE, _data(), checkpoint_dir=tmp_path, **SETTINGS)
    assert isinstance(e.value, KeyboardInterrupt)
    assert e.value.step == 13 and e.value.checkpoint == tmp_path / "checkpoint.pt"
    assert exit_status(e.value) == 128 + signum  # 143 for SIGTERM, 130 for SIGINT
    assert str(e.value) == (f"stopped by {signal.Signals(signum).name} after step 13; checkpoint written to "
                            f"{tmp_path / 'checkpoint.pt'} (resume with it)")
    assert max(calls) == 13
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL  # the fit's handlers are gone
    assert torch.load(tmp_path / "checkpoint.pt", weights_only=True)["step"] == 13
    monkeypatch.setattr(training, "check_finite_loss", real)
    resumed = heatwalk.fit(SPACE, _data(), checkpoint_dir=tmp_path, resume=True, **SETTINGS)
    assert resumed.record["resumed_from_step"] == 13
    assert _same_weights(resumed, uninterrupted)  # bit for bit
    assert resumed.record["mean_loss_last_100_steps"] == uninterrupted.record["mean_loss_last_100_steps"]


def test_terminate_as_interrupt_makes_sigterm_a_keyboard_interrupt():
    previous = signal.getsignal(signal.SIGTERM)
    try:
        terminate_as_interrupt()
        with pytest.raises(KeyboardInterrupt) as e:
            os.kill(os.getpid(), signal.SIGTERM)
            signal.sigtimedwait([], 0)  # a point where the handler runs, should delivery lag
        assert exit_status(e.value) == 143 and str(e.value) == "stopped by SIGTERM"
    finally:
        signal.signal(signal.SIGTERM, previous)
    assert exit_status(KeyboardInterrupt()) == 130
