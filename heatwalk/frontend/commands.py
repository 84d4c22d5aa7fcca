"""The commands behind the parser of :mod:`heatwalk.frontend.cli`: fit, sample, evaluate, torsions, info."""

from __future__ import annotations

import math
import time
from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.frontend.options import chosen_options


def _space_class(name: str):
    from heatwalk.spaces import SPACE_KINDS

    if name not in SPACE_KINDS:
        raise InputError(f"unknown space {name!r}; choose one of {sorted(SPACE_KINDS)}", field="space")
    return SPACE_KINDS[name]


def settle(args, flags):
    """Defaults and ranges of ``flags`` applied (:func:`~heatwalk.frontend.flags.apply_defaults`), then the threads
    set and the device resolved (before any work, so a device this machine lacks is refused at once);
    returns the torch device (None for a command without ``--device``)."""
    from heatwalk.core.devices import resolve_device, set_threads
    from heatwalk.frontend.flags import apply_defaults

    apply_defaults(args, flags)
    set_threads(getattr(args, "threads", None))
    return resolve_device(args.device) if getattr(args, "device", None) is not None else None


def _check_checkpoint_folder(folder) -> None:
    if folder is not None and Path(folder).exists() and not Path(folder).is_dir():
        raise InputError(f"--checkpoints {folder} is a file; give a folder (it is made when missing)",
                         field="checkpoints")


def _on_cpu(x):
    """Points (a tensor, or a tuple of them for a product) on the CPU, for writing and metrics."""
    import torch

    from heatwalk.core.devices import to_device

    return to_device(x, torch.device("cpu"))


def _require(args, *names) -> None:
    for name in names:
        if getattr(args, name, None) in (None, ""):
            flag = name if name in ("data", "model") else "--" + name.replace("_", "-")
            raise InputError(f"{flag} is required (on the command line or in the --config file)", field=name)


def _file_options(args, model) -> dict:
    """Reading options given on the command line, else those the model was fitted with."""
    space_cls = type(model.space)
    options = chosen_options(args, space_cls)
    file_names = {o.name for o in space_cls.file_options}
    options = {k: v for k, v in options.items() if k in file_names}
    return options or dict(model.record.get("reading_options", {}))


# ----- fit ----------------------------------------------------------------------------------------------
def _resolve_fit(args):
    """Merge config file, command line and defaults; returns (the fit flags, every config key's type)."""
    from heatwalk.frontend.config_file import merge_config
    from heatwalk.frontend.flags import apply_defaults, fit_flags
    from heatwalk.frontend.options import declared_option_kinds

    flags = fit_flags()
    kinds = {f.name: (list if f.name == "columns" else f.kind) for f in flags} | declared_option_kinds()
    if args.config:
        merge_config(args, args.config, kinds)
    apply_defaults(args, flags)
    _require(args, "data", "space", "out")
    return flags, kinds


def cmd_fit(args) -> int:
    import heatwalk
    from heatwalk.core.parallel import is_main_process
    from heatwalk.frontend.config_file import resolved_toml
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.points import files_for, split_options

    flags, kinds = _resolve_fit(args)
    space_cls = _space_class(args.space)
    options = chosen_options(args, space_cls)
    config_text = resolved_toml(args, list(kinds))
    if args.dry_run:
        print(config_text, end="")
        return 0
    device = settle(args, flags)
    out = check_output_path(args.out, kind="folder", overwrite=args.overwrite,
                            inputs={"data": args.data, "checkpoint folder": args.checkpoints,
                                    "config file": args.config})
    _check_checkpoint_folder(args.checkpoints)
    columns = [c.strip() for c in args.columns.split(",")] if args.columns else None
    space, x, facts = files_for(space_cls).read_new(args.data, space_cls, options, columns=columns,
                                                    labels=args.labels or None, delimiter=args.delimiter)
    network = {k: v for k, v in (("hidden", args.hidden), ("depth", args.depth)) if v is not None}
    labels = None if facts["labels"] is None else list(facts["labels"])
    model = heatwalk.fit(space, x, steps=args.train_steps, batch_size=args.batch_size, lr=args.learning_rate,
                         seed=args.seed, network=network, progress=not args.quiet,
                         checkpoint_dir=args.checkpoints, checkpoint_every=args.checkpoint_every,
                         resume=args.resume, inpainting=args.inpainting, labels=labels,
                         label_dropout=args.label_dropout, device=device)
    if not is_main_process():  # torchrun: every process trained the same model; the first one writes it
        return 0
    model.record["data_file"] = str(Path(args.data).resolve())
    model.record["reading_options"] = split_options(space_cls, options)[0]
    model.record.update({k: facts[k] for k in ("columns", "ignored", "label_column") if facts.get(k)})
    model.save(out, overwrite=args.overwrite, extra_files={"fit_config.toml": config_text})
    print(summary(model, out))
    return 0


def summary(model, folder) -> str:
    """The one-screen summary printed at the end of ``fit`` and by ``heatwalk info``."""
    r = model.record
    lines = [f"heatwalk model in {folder}",
             f"  space        {model.space!r}",
             f"  data         {r.get('n_data', '?')} points from {r.get('data_file', '(Python API)')}"]
    if r.get("columns"):
        lines.append(f"  columns      {', '.join(r['columns'])} ({len(r['columns'])} per point)"
                     + (f"; labels from {r['label_column']}" if r.get("label_column") else ""))
    if r.get("ignored"):
        lines.append(f"  ignored      {', '.join(r['ignored'])}")
    if r.get("reading_options"):
        lines.append("  reading      " + ", ".join(f"{k}={v}" for k, v in r["reading_options"].items()))
    if model.classes is not None:
        lines.append(f"  labels       {len(model.classes)} classes: {', '.join(map(str, model.classes[:8]))}"
                     + (" …" if len(model.classes) > 8 else ""))
    loss = r.get("mean_loss_last_100_steps")
    lines.append(f"  training     {r.get('steps', '?')} steps, batch {r.get('batch_size', '?')}, "
                 f"learning rate {r.get('lr', '?')}, seed {r.get('seed', '?')}"
                 + (f", resumed from step {r['resumed_from_step']}" if r.get("resumed_from_step") else ""))
    lines.append("  loss         " + (f"{loss:.4f} (mean of the last 100 steps)" if loss is not None else "n/a")
                 + (f", {r['train_seconds']:.1f} s" if "train_seconds" in r else ""))
    lines.append(f"  objective    {model.objective.name}; default sampler {model.objective.default_sampler}"
                 + ("; trained for fixed coordinates" if model.objective.inpainting else ""))
    lines.append(f"  network      {type(model.network).__name__} with "
                 f"{sum(p.numel() for p in model.network.parameters())} parameters")
    return "\n".join(lines)


def cmd_info(args) -> int:
    import heatwalk

    print(summary(heatwalk.load(args.model), args.model))
    return 0


# ----- sample -----------------------------------------------------------------------------------------
def _column_names(model, options) -> list[str]:
    return list(model.record.get("columns") or model.space.column_names(**options))


def _output_names(model, options):
    """The model's data column names for written samples when they fit the written columns (else the space's)."""
    names = model.record.get("columns")
    if names and len(names) == len(model.space.column_names(**options)):
        return list(names)
    return None


def _given_from_rows(model, names, rows, options, where, place=None) -> tuple[dict, dict]:
    """``given`` for Model.sample from named values in the data file's units (one row or one per sample), and
    the values as given by column index (one value or one per sample), for writing them back exactly.
    ``place(i)`` names row i of a file in messages (e.g. "line 3")."""
    import torch

    columns = _column_names(model, options)
    space = model.space
    index = []
    for name in names:
        if name not in columns:
            raise InputError(f"{where}: {name!r} is not a column of the model's data ({', '.join(columns)})",
                             field="fix")
        index.append(columns.index(name))
    if "sequences" in space.capabilities:
        return {i: [row[k] for row in rows] if len(rows) > 1 else rows[0][k] for k, i in enumerate(index)}, {}
    states = space.column_states(**options)
    values = torch.tensor([[_fixed_number(v, columns[i], states.get(i), where) for v, i in zip(row, index)]
                           for row in rows], dtype=torch.float64)
    try:
        given = space.given_from_columns(index, values, names=columns, **options)
    except InputError as e:
        from heatwalk.io.tables import in_file_terms

        row = f"{place(e.row) if place else f'row {e.row + 1}'}, " if len(rows) > 1 and e.row is not None else ""
        message = in_file_terms(e, columns, numbered=False).message      # the model's columns, not the file's
        raise InputError(f"{where}: {row}{message}", row=e.row, field="fix") from None
    as_given = {i: values[0, k].item() if len(rows) == 1 else values[:, k].numpy() for k, i in enumerate(index)
                if i not in states}
    return given, as_given


def _fixed_number(value, column: str, states, where: str) -> float:
    """A fixed value as the number its column holds: a number, or for a column of named states (``states``)
    the state's code."""
    if states is not None:
        name = value.decode() if isinstance(value, bytes) else str(value).strip()
        if name not in states:
            from heatwalk.spaces.alphabet import shown_states

            raise InputError(f"{where}: {column}={name!r} is not one of its {len(states)} states "
                             f"{shown_states(states)}", field="fix")
        return float(states.index(name))
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{where}: {column}={value!r} is not a number", field="fix") from None
    if not math.isfinite(number):
        raise InputError(f"{where}: {column}={value!r} is not a finite number", field="fix")
    return number


def _parse_fix(model, fixes, options) -> tuple[dict, dict]:
    names, values = [], []
    for item in fixes:
        if "=" not in item:
            raise InputError(f"--fix {item!r}: expected NAME=VALUE, e.g. --fix phi=-60", field="fix")
        name, value = item.split("=", 1)
        names.append(name.strip())
        values.append(value.strip())
    return _given_from_rows(model, names, [values], options, "--fix")


def _parse_given_file(model, path, options, n: int) -> tuple[dict, dict]:
    from heatwalk.io.table_base import position_names
    from heatwalk.io.tables import read_table, table_column_names

    names = table_column_names(path)
    if names == position_names(len(names)):
        raise InputError(f"{path}: a --given table needs a header naming its columns", field="given")
    columns = _column_names(model, options)
    named = {columns[j] for j in model.space.column_states(**options)}
    table = read_table(path, text_columns=[k for k, name in enumerate(names) if name in named])
    if table.values.shape[0] not in (1, n):
        raise InputError(f"{path}: {table.values.shape[0]} rows; give one row (the same values for every sample) "
                         f"or one row per sample (--n {n})", field="given")
    rows = table.values.tolist()
    for k, cells in (table.text or {}).items():
        for row, cell in zip(rows, cells):
            row[k] = cell
    return _given_from_rows(model, table.names, rows, options, str(path),
                            place=lambda i: f"{table.unit} {int(table.lines[i])}")


def cmd_sample(args) -> int:
    import heatwalk
    from heatwalk.frontend.flags import sample_flags
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.points import files_for

    device = settle(args, sample_flags())
    _require(args, "n", "out")
    out = check_output_path(args.out, kind="file", overwrite=args.overwrite,
                            inputs={"model": args.model, "--given table": args.given})
    model = heatwalk.load(args.model)
    files_for(model.space).check_output(out)
    options = _file_options(args, model)
    asked = []                                       # (given, values as given); --fix overrides --given
    if args.given:
        asked.append(_parse_given_file(model, args.given, options, args.n))
    if args.fix:
        asked.append(_parse_fix(model, args.fix, options))
    given = {k: v for g, _ in asked for k, v in g.items()}
    as_given = {j: v for _, values in asked for j, v in values.items()}
    t0 = time.perf_counter()
    x = model.sample(args.n, steps=args.reverse_steps, sampler=args.sampler, seed=args.seed,
                     progress=not args.quiet, label=args.label, guidance=args.guidance, given=given or None,
                     given_method=args.given_method, device=device)
    files_for(model.space).write(out, model.space, _on_cpu(x), options, overwrite=args.overwrite,
                                 names=_output_names(model, options), as_given=as_given)
    print(f"wrote {args.n} samples to {out} in {time.perf_counter() - t0:.1f} s")
    return 0


# ----- evaluate, torsions ------------------------------------------------------------------------------
def cmd_evaluate(args) -> int:
    import heatwalk
    from heatwalk.frontend.evaluation import evaluate, format_table, write_per_point, write_pictures, write_report
    from heatwalk.frontend.flags import evaluate_flags
    from heatwalk.frontend.picture_command import picture_units_and_names
    from heatwalk.io.atomic import atomic_dir
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.points import files_for

    device = settle(args, evaluate_flags())
    _require(args, "out")
    inputs = {"model": args.model, "data": args.data}
    out = check_output_path(args.out, kind="folder", overwrite=args.overwrite, inputs=inputs)
    if args.per_point and args.likelihood_points == 0:
        raise InputError("--per-point needs log-likelihoods: --likelihood-points must be > 0", field="per_point")
    model = heatwalk.load(args.model)
    options = _file_options(args, model)
    columns = model.record.get("columns")
    x = files_for(model.space).read(args.data, model.space, options, columns=columns)
    if columns is None and model.space.file_kind == "table":
        columns = model.space.column_names(**options)
    result = evaluate(model, x, seed=args.seed, sample_steps=args.reverse_steps, sampler=args.sampler,
                      likelihood_points=args.likelihood_points, progress=not args.quiet, data_file=args.data,
                      columns=columns, model_folder=args.model, device=device)
    with atomic_dir(out, overwrite=args.overwrite) as folder:  # the report appears whole, or not at all
        written = list(write_report(folder, result.report))
        if args.per_point:
            written.append(write_per_point(folder / "per_point.csv", result))
        written += write_pictures(folder, model, x, result,
                                  picture_units_and_names(model.space, options, columns))
    print(format_table(result.report))
    print("wrote " + ", ".join(str(out / p.name) for p in written))
    return 0


def cmd_torsions(args) -> int:
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.structures import torsion_table, write_torsion_table

    out = check_output_path(args.out, kind="file", overwrite=args.overwrite,
                            inputs=[*args.structures, args.topology])
    table = torsion_table(args.structures, topology=args.topology, chi=args.chi,
                          keep_incomplete=args.keep_incomplete, progress=not args.quiet)
    write_torsion_table(table, out, overwrite=args.overwrite)
    frames = table["frame"].nunique() if len(table) else 0
    print(f"wrote {len(table)} residues ({frames} frame(s), {len(args.structures)} file(s)) to {out}")
    return 0
