"""Every command of the README's command-line tour runs as shown (with small step counts appended)."""

import re
import shlex
from pathlib import Path

import pytest

from heatwalk.frontend.cli import main

README = Path(__file__).resolve().parent.parent / "README.md"

#: appended to each command so the tour runs in seconds; a later flag overrides an earlier one in argparse
SMALL = {
    "demo": ["--train-steps", "30", "--reverse-steps", "5", "--likelihood-points", "5", "--quiet"],
    "fit": ["--train-steps", "20", "--hidden", "16", "--quiet"],
    "sample": ["--reverse-steps", "5", "--quiet"],
    "evaluate": ["--reverse-steps", "5", "--likelihood-points", "5", "--quiet"],
    "plot": ["--n-samples", "200", "--reverse-steps", "5", "--grid", "12", "--quiet"],
}


def tour_commands() -> list[list[str]]:
    text = README.read_text()
    section = text[text.index("## A tour of the command line"):]
    block = re.search(r"```bash\n(.*?)```", section, re.S).group(1)
    return [shlex.split(line)[1:] for line in block.splitlines() if line.startswith("heatwalk ")]


def test_the_tour_has_commands():
    cmds = tour_commands()
    assert [c[0] for c in cmds][:2] == ["demo", "fit"] and len(cmds) >= 6


def test_every_tour_command_runs(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    for argv in tour_commands():
        small = SMALL.get(argv[0], [])
        if "--losses" in argv or "--data" not in argv and "--model" not in argv:
            small = [f for f in small if f not in ("--grid", "12")]
        code = main(argv + small)
        out = capsys.readouterr()
        assert code == 0, (argv, out.err)
        if "--dry-run" in argv:
            assert "train_steps = 20" in out.out and not Path("tour-model-2").exists()
    assert Path("tour-samples.parquet").is_file() and Path("tour-report/evaluation.json").is_file()
    assert Path("tour-report/per_point.csv").is_file()
    plots = [c for c in tour_commands() if c[0] == "plot"]
    assert plots and all(Path(c[c.index("--out") + 1]).stat().st_size > 0 for c in plots)
    import numpy as np

    fixed = np.loadtxt("tour-psi-given-phi.csv", delimiter=",", skiprows=1)
    assert np.allclose(fixed[:, 0], -1.1, atol=1e-12)
