"""The ``heatwalk`` command line: demo, fit, sample, evaluate.

    heatwalk demo [--out DIR]
    heatwalk fit DATA.csv --space torus --out MODEL_DIR [--degrees] [--steps N] ...
    heatwalk sample MODEL_DIR --n N --out SAMPLES.csv [--sampler NAME] [--steps N]
    heatwalk evaluate MODEL_DIR DATA.csv --out REPORT_DIR

Bad input (unreadable or malformed data, wrong options) prints one line
``heatwalk: error: ...`` naming the file, line and problem, writes nothing,
and exits with status 2.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import torch

from heatwalk.errors import InputError

EXIT_BAD_INPUT = 2


# ----- spaces from the command line --------------------------------------------------------------
def _reading_options(args) -> dict:
    """Options for space.from_rows / to_rows taken from the command line."""
    opts = {}
    if getattr(args, "degrees", False):
        opts["degrees"] = True
    if getattr(args, "lonlat", False):
        opts["lonlat_degrees"] = True
    if getattr(args, "rotation_format", None):
        opts["format"] = args.rotation_format
    if getattr(args, "quaternion_order", None):
        opts["order"] = args.quaternion_order
    if getattr(args, "zero_replacement", None) is not None:
        opts["zero_replacement"] = args.zero_replacement
    if getattr(args, "rescale", False):
        opts["rescale"] = True
    return opts


def space_for_table(kind: str, n_columns: int, options: dict):
    """The space named ``kind`` whose dimension fits a table of ``n_columns`` columns."""
    from heatwalk.spaces import SPACE_KINDS

    if kind not in SPACE_KINDS:
        raise InputError(f"unknown space {kind!r}; choose one of {sorted(SPACE_KINDS)}", field="space")
    cls = SPACE_KINDS[kind]
    if kind == "torus":
        return cls(n_columns)
    if kind == "sphere":
        return cls(2) if options.get("lonlat_degrees") else cls(n_columns - 1)
    if kind == "so3":
        return cls()
    if kind == "simplex":
        return cls(n_columns)
    raise InputError(f"space {kind!r} is not read from CSV tables", field="space")


def _sequence_options(args) -> dict:
    opts = {"format": getattr(args, "sequence_format", None) or "auto"}
    if getattr(args, "alphabet", None):
        opts["alphabet"] = args.alphabet
    if getattr(args, "length", None):
        opts["length"] = args.length
    if getattr(args, "uppercase", False):
        opts["uppercase"] = True
    return opts


def _read_for_fit(args):
    """(points, space, reading options) for the data file of ``heatwalk fit``."""
    from heatwalk.io.tables import read_points, read_table

    if args.space == "categories":  # FASTA or one-sequence-per-line text
        from heatwalk.io.sequence_files import read_sequences

        opts = _sequence_options(args)
        seqs = read_sequences(args.data, **opts)
        return seqs.codes, seqs.space(process=args.process), opts
    options = _reading_options(args)
    rows, _, _ = read_table(args.data)
    space = space_for_table(args.space, rows.shape[1], options)
    return read_points(args.data, space, **options), space, options


def _read_with_space(path, space, options):
    """Points of a data file on a known space (a fitted model's), with the model's reading options."""
    from heatwalk.io.tables import read_points

    if space.config()["kind"] == "categories":
        from heatwalk.io.sequence_files import read_sequences

        opts = {k: v for k, v in options.items() if k in ("format", "uppercase")}
        return read_sequences(path, alphabet=space.alphabet, length=space.L, **opts).codes
    return read_points(path, space, **options)


def _write_samples(path, space, x, options, overwrite):
    from heatwalk.io.tables import write_points

    if space.config()["kind"] == "categories":
        from heatwalk.io.sequence_files import write_sequences

        fmt = "text" if str(path).endswith((".txt", ".text")) else "fasta"
        return write_sequences(path, x, space.alphabet, format=fmt, overwrite=True)
    return write_points(path, space, x, **options)


# ----- commands ----------------------------------------------------------------------------------
def cmd_fit(args) -> int:
    import heatwalk

    out = Path(args.out)
    if out.exists() and not args.overwrite:
        raise InputError(f"{out} already exists (pass --overwrite to replace it)", field="out")
    x, space, options = _read_for_fit(args)
    network = {k: v for k, v in (("hidden", args.hidden), ("depth", args.depth)) if v is not None}
    model = heatwalk.fit(space, x, steps=args.steps, batch_size=args.batch_size, lr=args.learning_rate,
                         seed=args.seed, network=network, progress=not args.quiet,
                         checkpoint_dir=args.checkpoints, checkpoint_every=args.checkpoint_every,
                         resume=args.resume)
    model.record["data_file"] = str(Path(args.data).resolve())
    model.record["reading_options"] = options
    model.save(out, overwrite=args.overwrite)
    print(f"fitted {space!r} to {x.shape[0]} points in {model.record['train_seconds']:.1f} s "
          f"(final loss {model.record['final_loss']:.4f}); model written to {out}")
    return 0


def cmd_sample(args) -> int:
    import heatwalk

    model = heatwalk.load(args.model)
    out = Path(args.out)
    if out.exists() and not args.overwrite:
        raise InputError(f"{out} already exists (pass --overwrite to replace it)", field="out")
    options = _reading_options(args) or dict(model.record.get("reading_options", {}))
    t0 = time.perf_counter()
    x = model.sample(args.n, steps=args.steps, sampler=args.sampler, seed=args.seed, progress=not args.quiet)
    if model.space.config()["kind"] == "categories":
        options = {}
    _write_samples(out, model.space, x, options, args.overwrite)
    print(f"wrote {args.n} samples to {out} in {time.perf_counter() - t0:.1f} s")
    return 0


def cmd_evaluate(args) -> int:
    import heatwalk
    from heatwalk.frontend.evaluation import evaluate, format_table, write_report
    from heatwalk.frontend.plots import plot_data_and_samples

    model = heatwalk.load(args.model)
    options = _reading_options(args) or dict(model.record.get("reading_options", {}))
    x = _read_with_space(args.data, model.space, options)
    report, samples = evaluate(model, x, seed=args.seed, sample_steps=args.steps, sampler=args.sampler,
                               likelihood_points=args.likelihood_points, progress=not args.quiet)
    report["model"] = str(Path(args.model).resolve())
    report["data_file"] = str(Path(args.data).resolve())
    j, t = write_report(args.out, report)
    pic = plot_data_and_samples(model.space, x, samples, Path(args.out) / "data_vs_samples.png",
                                title="data vs samples")
    print(format_table(report))
    print(f"wrote {j}, {t}" + (f", {pic}" if pic else " (no picture for this space)"))
    return 0


def cmd_demo(args) -> int:
    import numpy as np

    import heatwalk
    from heatwalk.frontend.demo_data import lanternfold_torsions
    from heatwalk.io.tables import write_points
    from heatwalk.frontend.metrics import circular_wasserstein, mmd_with_floor
    from heatwalk.frontend.plots import plot_data_and_samples
    from heatwalk.spaces import Torus

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    space = Torus(2)
    data = space.validate(lanternfold_torsions(6000, seed=args.seed))
    train, held_a, held_b = data[:4000], data[4000:5000], data[5000:]
    print("demo: fitting backbone torsions (phi, psi) of the invented 'lanternfold' peptide family on T^2")
    write_points(out / "lanternfold_torsions.csv", space, train)
    model = heatwalk.fit(space, train, steps=args.steps, batch_size=512, seed=args.seed, progress=not args.quiet)
    model.save(out / "model", overwrite=True)
    samples = model.sample(2000, steps=args.sample_steps, sampler="predictor_corrector", seed=args.seed,
                           progress=not args.quiet)
    write_points(out / "samples.csv", space, samples)
    uniform = space.random_uniform(2000, torch.Generator().manual_seed(args.seed + 1))
    m_model = mmd_with_floor(space, samples, held_a, held_b)
    m_unif = mmd_with_floor(space, uniform, held_a, held_b, bandwidth=m_model["bandwidth"])
    w_model = circular_wasserstein(samples, held_a)
    w_unif = circular_wasserstein(uniform, held_a)
    report = {
        "space": space.config(), "n_train": 4000, "n_heldout": [1000, 1000], "seed": args.seed,
        "fit": model.record,
        "mmd2_model": m_model["mmd2"], "mmd2_uniform": m_unif["mmd2"], "mmd2_noise_floor": m_model["floor"],
        "mmd_bandwidth_rad": m_model["bandwidth"],
        "wasserstein1_per_angle_model_rad": w_model, "wasserstein1_per_angle_uniform_rad": w_unif,
    }
    (out / "report.json").write_text(json.dumps(report, indent=2) + "\n")
    pic = plot_data_and_samples(space, train, samples, out / "torsions.png",
                                title="lanternfold torsions: data vs heatwalk samples")
    print(f"  MMD^2 (geodesic Gaussian kernel, bandwidth {m_model['bandwidth']:.3f} rad): "
          f"model {m_model['mmd2']:.5f}, uniform {m_unif['mmd2']:.5f}, noise floor {m_model['floor']:.5f}")
    print(f"  W1 per angle (rad): model {np.round(w_model, 4).tolist()}, uniform {np.round(w_unif, 4).tolist()}")
    print(f"  wrote {out / 'samples.csv'}, {pic}, {out / 'report.json'}, {out / 'model'}")
    return 0


# ----- parser ------------------------------------------------------------------------------------
def _add_reading_flags(p):
    g = p.add_argument_group("reading and writing points")
    g.add_argument("--degrees", action="store_true", help="angles (torus, rotation vectors) are in degrees")
    g.add_argument("--lonlat", action="store_true",
                   help="sphere: two columns latitude, longitude in degrees (a point on S^2)")
    g.add_argument("--rotation-format", choices=["matrix", "quaternion", "rotvec"],
                   help="so3: 9 matrix entries (row-major), 4 quaternion components, or a rotation vector")
    g.add_argument("--quaternion-order", choices=["wxyz", "xyzw"],
                   help="so3 with quaternions: the component order (required: there is no default)")
    g.add_argument("--zero-replacement", type=float, metavar="DELTA",
                   help="simplex: replace zero parts by DELTA (multiplicative replacement)")
    g.add_argument("--rescale", action="store_true",
                   help="simplex: divide each row by its total (amounts, percentages, rounded shares)")
    q = p.add_argument_group("reading sequences (space categories)")
    q.add_argument("--sequence-format", choices=["auto", "fasta", "text"],
                   help="FASTA or one sequence per line (default: auto)")
    q.add_argument("--alphabet", help="the states as a string of symbols (default: those that occur)")
    q.add_argument("--length", type=int, help="required sequence length (default: the first record's)")
    q.add_argument("--uppercase", action="store_true", help="fold symbols to upper case")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="heatwalk", description="Diffusion models on manifolds and finite state "
                                "spaces with exact heat kernels.")
    sub = p.add_subparsers(dest="command", required=True)

    d = sub.add_parser("demo", help="fit and sample the built-in invented torsion-angle scenario")
    d.add_argument("--out", default="demo-output", help="output folder (default: demo-output)")
    d.add_argument("--steps", type=int, default=3000, help="training steps (default 3000)")
    d.add_argument("--sample-steps", type=int, default=300, help="reverse steps when sampling (default 300)")
    d.add_argument("--seed", type=int, default=0)
    d.add_argument("--quiet", action="store_true", help="no progress bars")
    d.set_defaults(func=cmd_demo)

    f = sub.add_parser("fit", help="fit a model to a data file")
    f.add_argument("data", help="CSV of points (one per line), or FASTA / text of sequences")
    f.add_argument("--space", required=True, help="torus, sphere, so3, simplex, categories")
    f.add_argument("--process", choices=["absorbing", "uniform"], default="absorbing",
                   help="categories: the forward chain (default absorbing: masking)")
    f.add_argument("--out", required=True, help="model folder to write")
    f.add_argument("--overwrite", action="store_true", help="replace an existing model folder")
    f.add_argument("--steps", type=int, default=3000)
    f.add_argument("--batch-size", type=int, default=512)
    f.add_argument("--learning-rate", type=float, default=2e-3)
    f.add_argument("--hidden", type=int, help="network width (default: the objective's, 256 for manifolds)")
    f.add_argument("--depth", type=int, help="network depth (hidden layers; transformer layers for sequences)")
    f.add_argument("--seed", type=int, default=0)
    f.add_argument("--checkpoints", help="folder for periodic training checkpoints")
    f.add_argument("--checkpoint-every", type=int, default=1000)
    f.add_argument("--resume", action="store_true", help="continue from the checkpoint in --checkpoints")
    f.add_argument("--quiet", action="store_true", help="no progress bars")
    _add_reading_flags(f)
    f.set_defaults(func=cmd_fit)

    s = sub.add_parser("sample", help="draw samples from a fitted model")
    s.add_argument("model", help="model folder written by 'heatwalk fit'")
    s.add_argument("--n", type=int, required=True, help="number of samples")
    s.add_argument("--out", required=True, help="file to write (CSV; FASTA/text for sequences)")
    s.add_argument("--overwrite", action="store_true")
    s.add_argument("--steps", type=int, default=500, help="reverse steps")
    s.add_argument("--sampler", help="sampler name (default: the model's)")
    s.add_argument("--seed", type=int, default=0)
    s.add_argument("--quiet", action="store_true")
    _add_reading_flags(s)
    s.set_defaults(func=cmd_sample)
    e = sub.add_parser("evaluate", help="report log-likelihood and sample metrics of a model on data")
    e.add_argument("model", help="model folder written by 'heatwalk fit'")
    e.add_argument("data", help="data file in the format the model was fitted on")
    e.add_argument("--out", required=True, help="folder for evaluation.json, evaluation.txt and a picture")
    e.add_argument("--steps", type=int, default=300, help="reverse steps when sampling")
    e.add_argument("--sampler", help="sampler name (default: the model's)")
    e.add_argument("--likelihood-points", type=int, default=500,
                   help="data points whose log-likelihood is computed (0: skip)")
    e.add_argument("--seed", type=int, default=0)
    e.add_argument("--quiet", action="store_true")
    _add_reading_flags(e)
    e.set_defaults(func=cmd_evaluate)
    return p


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except InputError as e:
        print(f"heatwalk: error: {e}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("heatwalk: interrupted; nothing more was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
