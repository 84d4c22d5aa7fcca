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


def chosen_picture_options(args, plot_kind: str) -> dict:
    """The picture options the user set, checked against the picture ``plot_kind`` declares."""
    from heatwalk.frontend.plots import PLOT_KINDS

    declared = {o.name for o in PLOT_KINDS[plot_kind].options}
    chosen = {}
    for name, decls in _declared_picture_options().items():
        value = getattr(args, name, None)
        if value is None or value is False:
            continue
        if name not in declared:
            takes = ", ".join(o.flag for o in PLOT_KINDS[plot_kind].options) or "none"
            raise InputError(f"{decls[0][1].flag} does not apply to the {plot_kind!r} picture (its options: "
                             f"{takes})", field=name)
        chosen[name] = value
    return chosen


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
