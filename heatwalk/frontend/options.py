"""Command-line flags built from what the spaces (and the pictures) declare.

Every registered space lists its reading/writing options (``file_options``)
and space-building options (``build_options``) as
:class:`heatwalk.spaces.Option` objects. :func:`add_space_option_flags` adds
one flag per option name (``--`` + name with ``-`` for ``_``), with the help
text of every space that declares it; :func:`chosen_options` collects the
flags a user set and refuses those the chosen space does not declare. Adding a
space therefore never touches the command line. The pictures of
:data:`heatwalk.frontend.plots.PLOT_KINDS` declare their options the same way
(``Picture.options``): :func:`add_picture_option_flags` and
:func:`chosen_picture_options` do for ``heatwalk plot`` what the two above do for
the spaces.
"""

from __future__ import annotations

from heatwalk.errors import InputError


def _declared_options():
    """{option name: [(space kind, Option), ...]} over every registered space, in registration order."""
    from heatwalk.spaces import SPACE_KINDS

    out: dict[str, list] = {}
    for kind, cls in SPACE_KINDS.items():
        for opt in (*cls.file_options, *cls.build_options):
            out.setdefault(opt.name, []).append((kind, opt))
    return out


def add_space_option_flags(parser) -> None:
    """One flag per declared option; ``None`` (or False) when not given, so a user's choice is visible."""
    _add_option_flags(parser.add_argument_group("reading and writing data (options of the space)"),
                      _declared_options())


def _declared_picture_options():
    """{option name: [(plot kind, Option), ...]} over every picture of ``PLOT_KINDS``."""
    from heatwalk.frontend.plots import PLOT_KINDS

    out: dict[str, list] = {}
    for kind, picture in PLOT_KINDS.items():
        for opt in picture.options:
            out.setdefault(opt.name, []).append((kind, opt))
    return out


def add_picture_option_flags(parser) -> None:
    """One flag per option a picture declares (``Picture.options``), with the help of every picture taking it."""
    _add_option_flags(parser.add_argument_group("picture options (each applies to the pictures named in its help)"),
                      _declared_picture_options())


def chosen_picture_options(args, space) -> dict:
    """The picture options the user set, checked against the picture ``space`` declares.

    A picture drawn factor by factor (a product's: its draw takes ``factor_options``) gives each option to
    every factor whose picture declares it, as ``factor_options``; an option that no picture of the figure
    takes is refused, naming the ones it does take.
    """
    chosen = {}
    for name in _declared_picture_options():
        value = getattr(args, name, None)
        if value is not None and value is not False:
            chosen[name] = value
    options, used, takes = _picture_options_for(space, chosen)
    for name in chosen:
        if name not in used:
            flags = ", ".join(dict.fromkeys(takes)) or "none"
            raise InputError(f"{_flag(name)} does not apply to the {space.plot_kind!r} picture (its options: "
                             f"{flags})", field=name)
    return options


def _flag(name: str) -> str:
    return _declared_picture_options()[name][0][1].flag


def _picture_options_for(space, chosen: dict):
    """(the options of ``chosen`` the picture of ``space`` takes, their names, the flags it declares)."""
    from heatwalk.frontend.plots import PLOT_KINDS
    from heatwalk.frontend.plots.figures import option_names

    picture = PLOT_KINDS.get(getattr(space, "plot_kind", None))
    if picture is None:  # no picture: nothing applies (drawing it names the factor that has none)
        return {}, set(), []
    if "factor_options" in option_names(picture.draw):
        parts = [_picture_options_for(f, chosen) for f in space.factors]
        return ({"factor_options": [p[0] for p in parts]}, set().union(*(p[1] for p in parts)),
                [flag for p in parts for flag in p[2]])
    options = {o.name: chosen[o.name] for o in picture.options if o.name in chosen}
    return options, set(options), [o.flag for o in picture.options]


def merge_picture_options(first: dict, second: dict) -> dict:
    """``first`` updated by ``second``; the per-factor dicts of ``factor_options`` are merged factor by factor."""
    out = first | second
    if "factor_options" in first and "factor_options" in second:
        out["factor_options"] = [merge_picture_options(a, b)
                                 for a, b in zip(first["factor_options"], second["factor_options"], strict=True)]
    return out


def _add_option_flags(group, declared: dict) -> None:
    from heatwalk.frontend.flags import range_text

    for name, decls in declared.items():
        first = decls[0][1]
        ranges = [(o.kind, o.choices, o.minimum, o.maximum, o.open_minimum, o.open_maximum) for _, o in decls]
        if any(r != ranges[0] for r in ranges):
            raise TypeError(f"spaces declare option {name!r} with different types, choices or ranges")
        help_text = "; ".join(f"{kind}: {o.help}" + (f" (default {o.default})" if o.default is not None else "")
                              for kind, o in decls) + range_text(first)
        if first.kind is bool:
            group.add_argument(first.flag, dest=name, action="store_true", default=None, help=help_text)
        else:
            group.add_argument(first.flag, dest=name, type=first.kind, choices=first.choices, default=None,
                               metavar=first.metavar, help=help_text)


def chosen_options(args, space_cls) -> dict:
    """The declared options the user set on the command line, checked against the space ``space_cls``
    (declared by it, and in the declared range)."""
    from heatwalk.frontend.flags import check_range

    declared = {o.name: o for o in (*space_cls.file_options, *space_cls.build_options)}
    chosen = {}
    for name, decls in _declared_options().items():
        value = getattr(args, name, None)
        if value is None or value is False:
            continue
        if name not in declared:
            takes = ", ".join(o.flag for o in (*space_cls.file_options, *space_cls.build_options)) or "none"
            raise InputError(f"{decls[0][1].flag} does not apply to --space {space_cls.kind} "
                             f"(its options: {takes})", field=name)
        chosen[name] = check_range(declared[name], value, args)
    return chosen


def declared_option_kinds() -> dict[str, type]:
    """{option name: its type} over every registered space's declared options (the config file's extra keys)."""
    return {name: decls[0][1].kind for name, decls in _declared_options().items()}


def declared_option_flags() -> dict[str, str]:
    """{option name: its flag} over every registered space's declared options."""
    return {name: decls[0][1].flag for name, decls in _declared_options().items()}
