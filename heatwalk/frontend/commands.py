"""The ``fit``, ``sample`` and ``evaluate`` commands (the parser is in :mod:`heatwalk.frontend.cli`)."""

from __future__ import annotations

import time
from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.frontend.options import chosen_options


def _space_class(name: str):
    from heatwalk.spaces import SPACE_KINDS

    if name not in SPACE_KINDS:
        raise InputError(f"unknown space {name!r}; choose one of {sorted(SPACE_KINDS)}", field="space")
    return SPACE_KINDS[name]


def _refuse_existing(out: Path, overwrite: bool) -> None:
    if out.exists() and not overwrite:
        raise InputError(f"{out} already exists (pass --overwrite to replace it)", field="out")


def _file_options(args, model) -> dict:
    """Reading options given on the command line, else those the model was fitted with."""
    space_cls = type(model.space)
    options = chosen_options(args, space_cls)
    file_names = {o.name for o in space_cls.file_options}
    options = {k: v for k, v in options.items() if k in file_names}
    return options or dict(model.record.get("reading_options", {}))


def cmd_fit(args) -> int:
    import heatwalk
    from heatwalk.io.points import files_for, split_options

    out = Path(args.out)
    _refuse_existing(out, args.overwrite)
    space_cls = _space_class(args.space)
    options = chosen_options(args, space_cls)
    space, x = files_for(space_cls).read_new(args.data, space_cls, options)
    network = {k: v for k, v in (("hidden", args.hidden), ("depth", args.depth)) if v is not None}
    model = heatwalk.fit(space, x, steps=args.steps, batch_size=args.batch_size, lr=args.learning_rate,
                         seed=args.seed, network=network, progress=not args.quiet,
                         checkpoint_dir=args.checkpoints, checkpoint_every=args.checkpoint_every,
                         resume=args.resume)
    model.record["data_file"] = str(Path(args.data).resolve())
    model.record["reading_options"] = split_options(space_cls, options)[0]
    model.save(out, overwrite=args.overwrite)
    print(f"fitted {space!r} to {x.shape[0]} points in {model.record['train_seconds']:.1f} s "
          f"(mean loss of the last 100 steps {model.record['mean_loss_last_100_steps']:.4f}); "
          f"model written to {out}")
    return 0


def cmd_sample(args) -> int:
    import heatwalk
    from heatwalk.io.points import files_for

    model = heatwalk.load(args.model)
    out = Path(args.out)
    _refuse_existing(out, args.overwrite)
    options = _file_options(args, model)
    t0 = time.perf_counter()
    x = model.sample(args.n, steps=args.steps, sampler=args.sampler, seed=args.seed, progress=not args.quiet)
    files_for(model.space).write(out, model.space, x, options, overwrite=args.overwrite)
    print(f"wrote {args.n} samples to {out} in {time.perf_counter() - t0:.1f} s")
    return 0


def cmd_evaluate(args) -> int:
    import heatwalk
    from heatwalk.frontend.evaluation import evaluate, format_table, write_report
    from heatwalk.frontend.plots import plot_data_and_samples
    from heatwalk.io.points import files_for

    model = heatwalk.load(args.model)
    x = files_for(model.space).read(args.data, model.space, _file_options(args, model))
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


def cmd_torsions(args) -> int:
    from heatwalk.io.structures import torsion_table, write_torsion_table

    out = Path(args.out)
    _refuse_existing(out, args.overwrite)
    table = torsion_table(args.structures, topology=args.topology, chi=args.chi,
                          keep_incomplete=args.keep_incomplete, progress=not args.quiet)
    write_torsion_table(table, out, overwrite=args.overwrite)
    frames = table["frame"].nunique() if len(table) else 0
    print(f"wrote {len(table)} residues ({frames} frame(s), {len(args.structures)} file(s)) to {out}")
    return 0
