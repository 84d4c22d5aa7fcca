"""``heatwalk plot``: the picture of a model, a data file, a samples file or two of them together; or a loss curve.

    heatwalk plot [--model MODEL_DIR] [--data FILE] [--samples FILE] --out PICTURE.(png|svg|pdf)
                  [--size W,H] [--dpi N] [picture options] [--losses]

The picture is the one the space declares (``space.plot_kind`` in ``PLOT_KINDS``), drawn by
:func:`heatwalk.frontend.plots.plot`. What it shows:

- a model alone, or with data: the model's own density (``exp(log_prob)`` on a grid) where the picture
  can show it (``Picture.model_density``), else ``--n-samples`` samples drawn from the model, whose
  smoothed histogram (or point sets) the picture draws; the title says which;
- data and samples files: the density of the samples with the data over it (or both point sets);
- ``--losses``: the model's training loss per step (its folder's ``losses.csv``).

Files are read with the model's reading options and columns (from its record) when ``--model`` is
given, else with ``--space`` and the space's reading flags. The picture is in the data's units and
column names: a torus model fitted with ``--degrees --columns phi,psi`` is drawn as a phi/psi map in
degrees. The format is chosen by the extension of ``--out``.
"""

from __future__ import annotations

from pathlib import Path

from heatwalk.errors import InputError


def _picture_path(args) -> Path:
    """``--out`` checked before any work: a known extension, and not an existing file without --overwrite."""
    from heatwalk.frontend.plots.figures import FORMATS
    from heatwalk.io.output_paths import check_output_path

    if args.out in (None, ""):
        raise InputError("--out is required (the picture to write: .png, .svg or .pdf)", field="out")
    out = Path(args.out)
    if out.suffix.lower() not in FORMATS:
        raise InputError(f"--out {out}: unknown picture format {out.suffix or '(no extension)'!r}; expected one of "
                         f"{', '.join(FORMATS)}", field="out")
    return check_output_path(out, kind="file", overwrite=args.overwrite,
                             inputs={"model": args.model, "data": args.data, "samples": args.samples})


def parse_size(text: str | None):
    """``"W,H"`` -> (W, H) pixels, or None."""
    if text is None:
        return None
    parts = text.replace("x", ",").split(",")
    try:
        w, h = (int(p) for p in parts)
    except ValueError:
        raise InputError(f"--size {text!r}: expected WIDTH,HEIGHT in pixels, e.g. --size 800,600", field="size") \
            from None
    return (w, h)


def _read_inputs(args, model):
    """(space, data, samples, reading options, column names) from --data / --samples (either may be absent)."""
    from heatwalk.frontend.commands import _space_class
    from heatwalk.frontend.options import chosen_options
    from heatwalk.io.points import files_for, split_options

    if model is not None:
        if args.space is not None and args.space != model.space.kind:
            raise InputError(f"--space {args.space}: the model {args.model} is on {model.space!r}", field="space")
        if args.columns:
            raise InputError(f"--columns: the files are read with the columns the model was fitted on "
                             f"({', '.join(model.record.get('columns') or model.space.column_names())})",
                             field="columns")
        space = model.space
        space_cls = type(space)
        names = {o.name for o in space_cls.file_options}
        options = {k: v for k, v in chosen_options(args, space_cls).items() if k in names}
        options = options or dict(model.record.get("reading_options", {}))
        columns = model.record.get("columns")
        read = {k: getattr(args, k) and files_for(space).read(getattr(args, k), space, options, columns=columns,
                                                              delimiter=args.delimiter) for k in ("data", "samples")}
        return space, read["data"], read["samples"], options, columns
    if args.space is None:
        raise InputError("--space is required to read --data / --samples without --model", field="space")
    space_cls = _space_class(args.space)
    options = chosen_options(args, space_cls)
    columns = [c.strip() for c in args.columns.split(",")] if args.columns else None
    first = "data" if args.data else "samples"
    space, x, facts = files_for(space_cls).read_new(getattr(args, first), space_cls, options, columns=columns,
                                                    delimiter=args.delimiter)
    columns = facts.get("columns") or columns
    file_options = split_options(space_cls, options)[0]
    read = {first: x}
    other = "samples" if first == "data" else "data"
    read[other] = getattr(args, other) and files_for(space).read(getattr(args, other), space, file_options,
                                                                 columns=columns, delimiter=args.delimiter)
    return space, read["data"], read["samples"], file_options, columns


def picture_units_and_names(space, options: dict, columns) -> dict:
    """The picture's ``degrees`` and ``columns`` from the data's reading options and column names, where the
    picture of ``space`` takes them (empty for a space without a picture)."""
    from heatwalk.frontend.plots import PLOT_KINDS
    from heatwalk.frontend.plots.figures import option_names

    if getattr(space, "plot_kind", None) not in PLOT_KINDS:
        return {}
    takes = option_names(PLOT_KINDS[space.plot_kind].draw)
    out = {}
    if "factor_options" in takes:  # a picture per factor: each gets its factor's units and column names
        spans = space.factor_columns(**options)
        names = columns if columns and len(columns) == spans[-1].stop else None
        out["factor_options"] = [
            picture_units_and_names(f, o, None if names is None else [names[c] for c in span])
            for f, o, span in zip(space.factors, space.factor_options(options), spans)]
    if "degrees" in takes and "degrees" in {o.name for o in type(space).file_options}:
        out["degrees"] = bool(options.get("degrees", False))
    if "columns" in takes and columns and len(columns) == len(space.column_names()):
        out["columns"] = list(columns)
    return out


def _check_losses_only(args) -> None:
    from heatwalk.frontend.options import _declared_picture_options

    if args.model is None:
        raise InputError("--losses draws a model's loss curve: give --model", field="losses")
    for name in ("data", "samples"):
        if getattr(args, name):
            raise InputError(f"--losses draws the loss curve alone; drop --{name} (draw it in another picture)",
                             field=name)
    for name, decls in _declared_picture_options().items():
        if getattr(args, name, None) is not None:
            raise InputError(f"{decls[0][1].flag} does not apply to the loss curve", field=name)


def cmd_plot(args) -> int:
    import heatwalk
    from heatwalk.frontend.commands import settle
    from heatwalk.frontend.flags import plot_flags
    from heatwalk.frontend.options import chosen_picture_options, merge_picture_options
    from heatwalk.frontend.plots import picture_for, plot, plot_losses, save_figure

    device = settle(args, plot_flags())
    out = _picture_path(args)
    size = parse_size(args.size)
    if args.losses:
        _check_losses_only(args)
        model = heatwalk.load(args.model)
        fig = plot_losses(model, size=size or (800, 450), dpi=args.dpi,
                          title=args.title if args.title is not None else f"training loss of the model {args.model}")
        save_figure(fig, out, overwrite=args.overwrite)
        print(f"wrote {out}: the training loss of {len(model.losses)} steps of the model {args.model}")
        return 0
    if not (args.model or args.data or args.samples):
        raise InputError("nothing to draw: give --model, --data or --samples (or --model with --losses)",
                         field="data")
    model = heatwalk.load(args.model) if args.model else None
    space, data, samples, reading, columns = _read_inputs(args, model)
    picture = picture_for(space)
    options = merge_picture_options(chosen_picture_options(args, space),
                                    picture_units_and_names(space, reading, columns))
    parts = []
    if model is not None and samples is None:
        if options.get("density") == "samples" or not picture.model_density(space):
            sampler = args.sampler or model.objective.default_sampler
            samples = model.sample(args.n_samples, steps=args.reverse_steps, sampler=sampler, seed=args.seed,
                                   progress=not args.quiet, device=device)
            parts.append(f"{args.n_samples} samples drawn from the model {args.model} ({sampler}, "
                         f"{args.reverse_steps} reverse steps)")
        elif options.get("density") in (None, "model"):
            parts.append(f"density of the model {args.model} (exp log_prob on a grid)")
    elif model is not None:
        parts.append(f"model {args.model}")
    if args.samples:
        parts.append(f"samples {args.samples} (n={space.n_points(samples)})")
    if args.data:
        parts.append(f"data {args.data} (n={space.n_points(data)})")
    caption = "; ".join(parts)
    fig = plot(space, data, samples, model=model, size=size, dpi=args.dpi,
               title="\n".join(parts) if args.title is None else args.title, **options)
    save_figure(fig, out, overwrite=args.overwrite)
    w, h = (round(v * fig.dpi) for v in fig.get_size_inches())
    print(f"wrote {out} ({w}x{h} px, the {space.plot_kind!r} picture of {space!r}): {caption}")
    return 0
