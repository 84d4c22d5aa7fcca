"""One report schema: the outputs of ``heatwalk demo`` and ``heatwalk evaluate`` both validate against
``REPORT_SCHEMA``; renamed, missing or mistyped keys and an inconsistent bound do not; per-point
log-likelihoods agree with the report's mean."""

from __future__ import annotations

import copy
import csv
import json
import math

import numpy as np
import pytest

from heatwalk.errors import InputError
from heatwalk.frontend.cli import main
from heatwalk.frontend.demo_data import lanternfold_torsions
from heatwalk.frontend.report_schema import REPORT_SCHEMA, SCHEMA_ID, report_problems, schema_rows, validate_report


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """(demo report, evaluate report, evaluate folder, sequence evaluate report), from small fast runs."""
    d = tmp_path_factory.mktemp("reports")
    assert main(["demo", "--out", str(d / "demo"), "--train-steps", "30", "--reverse-steps", "5",
                 "--likelihood-points", "5", "--quiet"]) == 0
    deg = np.degrees(np.asarray(lanternfold_torsions(200, seed=3)))
    np.savetxt(d / "t.csv", deg, delimiter=",", header="phi,psi", comments="")
    assert main(["fit", str(d / "t.csv"), "--space", "torus", "--degrees", "--out", str(d / "m"), "--train-steps",
                 "20", "--hidden", "16", "--batch-size", "64", "--quiet"]) == 0
    assert main(["evaluate", str(d / "m"), str(d / "t.csv"), "--out", str(d / "ev"), "--reverse-steps", "5",
                 "--likelihood-points", "6", "--per-point", "--quiet"]) == 0
    rng = np.random.default_rng(2)
    (d / "s.fasta").write_text("".join(f">r{i}\n{''.join(rng.choice(list('ACGT'), 6))}\n" for i in range(60)))
    assert main(["fit", str(d / "s.fasta"), "--space", "categories", "--out", str(d / "sm"), "--train-steps", "20",
                 "--batch-size", "32", "--quiet"]) == 0
    assert main(["evaluate", str(d / "sm"), str(d / "s.fasta"), "--out", str(d / "sev"), "--reverse-steps", "5",
                 "--likelihood-points", "8", "--quiet"]) == 0
    load = lambda p: json.loads(p.read_text())  # noqa: E731
    return (load(d / "demo" / "demo_report.json"), load(d / "ev" / "evaluation.json"), d / "ev",
            load(d / "sev" / "evaluation.json"), d)


def test_demo_and_evaluate_follow_the_one_schema(reports):
    demo, ev, _, seq, _ = reports
    for r in (demo, ev, seq):
        assert validate_report(r) is r and r["schema"] == SCHEMA_ID
    assert demo["command"] == "demo" and ev["command"] == "evaluate"
    # the same sections and the same keys in each section, whichever command wrote it
    assert set(demo) == set(ev) == set(REPORT_SCHEMA["properties"])
    for section in ("data", "model", "fit", "likelihood", "timings_seconds"):
        assert set(demo[section]) == set(ev[section]), section
    assert set(demo["sample_metrics"]) - set(ev["sample_metrics"]) == {"uniform_baseline"}
    assert ev["space"] == "Torus(n=2)" and ev["data"]["columns"] == ["phi", "psi"] and ev["data"]["n"] == 200
    assert ev["fit"]["steps"] == 20 and math.isfinite(ev["fit"]["final_loss"]) and ev["fit"]["train_seconds"] > 0
    # the demo's uniform baseline is farther from the data than the noise floor
    base = demo["sample_metrics"]["uniform_baseline"]["mmd_squared"]
    assert base["samples_vs_half_a"] > demo["sample_metrics"]["mmd_squared"]["noise_floor_half_b_vs_half_a"]


def test_bound_is_spelled_one_way_with_elbo_and_nll_bound(reports):
    _, ev, _, seq, _ = reports
    lik = ev["likelihood"]
    assert lik["bound"] is False and lik["elbo_nats"] is None and lik["nll_bound_nats"] is None
    assert math.isfinite(lik["mean_log_likelihood_nats"]) and lik["n"] == 6
    lik = seq["likelihood"]
    assert lik["bound"] is True and lik["mean_log_likelihood_nats"] is None
    assert lik["nll_bound_nats"] == -lik["elbo_nats"] and lik["bits_per_token"] > 0
    # bits per token = −ELBO / (L ln 2) for sequences of length L = 6
    assert lik["bits_per_token"] == pytest.approx(lik["nll_bound_nats"] / (6 * math.log(2)), rel=1e-9)
    text = json.dumps([ev, seq])
    assert "is_bound" not in text and "timings_s\"" not in text and "mmd2" not in text


def test_a_renamed_key_fails_validation(reports):
    _, ev, _, _, _ = reports
    renamed = copy.deepcopy(ev)
    renamed["likelihood"]["is_bound"] = renamed["likelihood"].pop("bound")
    problems = report_problems(renamed)
    assert "report.likelihood.bound: missing" in problems
    assert any(p.startswith("report.likelihood.is_bound: unknown key") for p in problems)
    with pytest.raises(InputError, match=r"does not follow heatwalk-report/1: .*likelihood\.bound: missing"):
        validate_report(renamed)
    renamed = copy.deepcopy(ev)
    renamed["timings_s"] = renamed.pop("timings_seconds")
    with pytest.raises(InputError, match="timings_seconds: missing"):
        validate_report(renamed)
    renamed = copy.deepcopy(ev)
    renamed["sample_metrics"]["mmd2"] = renamed["sample_metrics"].pop("mmd_squared")
    with pytest.raises(InputError, match="mmd_squared: missing"):
        validate_report(renamed)


@pytest.mark.parametrize("change, message", [
    (lambda r: r["likelihood"].update(bound="no"), r"likelihood\.bound: expected boolean"),
    (lambda r: r["data"].update(n=2.5), r"data\.n: expected integer"),
    (lambda r: r.update(command="train"), r"command: expected one of"),
    (lambda r: r["likelihood"].update(bound=True), r"bound is true, so elbo_nats"),
    (lambda r: r["sample_metrics"]["wasserstein1_per_angle_rad"].update(samples_vs_half_a=["x"]),
     r"samples_vs_half_a\[0\]: expected number"),
])
def test_mistyped_or_inconsistent_reports_fail(reports, change, message):
    bad = copy.deepcopy(reports[1])
    change(bad)
    with pytest.raises(InputError, match=message):
        validate_report(bad)


def test_per_point_table_and_pictures(reports):
    _, ev, folder, _, _ = reports
    rows = list(csv.DictReader(open(folder / "per_point.csv")))
    assert len(rows) == 6 and set(rows[0]) >= {"point", "log_likelihood_nats"}
    values = [float(r["log_likelihood_nats"]) for r in rows]
    assert np.mean(values) == pytest.approx(ev["likelihood"]["mean_log_likelihood_nats"], rel=1e-12)
    assert len({int(r["point"]) for r in rows}) == 6 and all(0 <= int(r["point"]) < 200 for r in rows)
    for name in ("evaluation.txt", "data_vs_samples.png", "losses.png", "log_likelihoods.png"):
        assert (folder / name).stat().st_size > 0, name


def test_text_report_is_readable(reports):
    d = reports[4]
    text = (d / "ev" / "evaluation.txt").read_text()
    assert "Torus(n=2)" in text and "{" not in text and "nats per point" in text
    seq = (d / "sev" / "evaluation.txt").read_text()
    assert "upper bound on the negative log-likelihood" in seq and "lower bound on log p" in seq
    assert "lower bound (negative ELBO)" not in seq
    demo = (d / "demo" / "demo_report.txt").read_text()
    assert "uniform vs half A" in demo and "{" not in demo


def test_per_point_needs_likelihoods(reports, capsys):
    d = reports[4]
    code = main(["evaluate", str(d / "m"), str(d / "t.csv"), "--out", str(d / "ev0"), "--likelihood-points", "0",
                 "--per-point", "--quiet"])
    assert code == 2 and "--per-point needs log-likelihoods" in capsys.readouterr().err
    assert not (d / "ev0").exists()


def test_readme_documents_every_key():
    """The README's schema table has a row per section, and each key is named in its section's row."""
    from pathlib import Path

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text()
    table = readme[readme.index("| section | keys"):]
    table = table[:table.index("\n\n")]
    rows = {line.split("|")[1].strip().strip("`"): line for line in table.splitlines()[2:]}
    for path, _, _ in schema_rows():
        parts = path.split(".")
        if parts[0] == "sample_metrics" and len(parts) >= 2:
            section, key = ".".join(parts[:2]), parts[-1] if len(parts) > 2 else None
        elif len(parts) == 1:
            if any(r.startswith(parts[0] + ".") for r in rows):  # a section whose parts have their own rows
                continue
            section, key = ("top level", parts[0]) if parts[0] not in rows else (parts[0], None)
        else:
            section, key = parts[0], parts[-1]
        assert section in rows, path
        assert key is None or f"`{key}`" in rows[section], path
