"""Error messages of the library restated in the words of the command line: Python keywords become flags.

The library's errors name options by their Python keyword, which is what a
caller of ``heatwalk.fit`` or ``Space.from_rows`` writes. On the command line
the same option is a flag, so :func:`for_command_line` rewrites a message
before the CLI prints it, for every name in :func:`flag_names` (the declared
flags of every command, the options the spaces declare, and the Python
keywords of ``fit`` whose flag has another name, such as ``lr`` for
``--learning-rate``):

- ``NAME=VALUE`` or ``NAME = VALUE`` (advice such as ``degrees=True`` or
  ``rotation_format='rotvec'``, a value quoted such as ``lr = 1e+30``) becomes ``--flag`` for
  ``True`` and ``--flag VALUE`` otherwise;
- a name with an underscore (``rotation_format``, ``batch_size``) standing as a
  word becomes its flag;
- any name as the subject of a check (``NAME must be``, ``NAME applies``,
  ``NAME needs``, at the start of the message or after ``: ``) becomes its flag.

Plain words that are also option names (``degrees``, ``length``) are left alone
elsewhere, so "angles given in degrees" keeps its meaning. File paths are not
touched (a name followed by ``.``, ``/`` or ``-`` and a letter is not a word here, nor one right after
``:``, as inside ``so3:4:rotation_format=quaternion``), nor a quoted
name (``'train_steps'``: a config-file key is named as it is written in the file), nor the repr of an
object (``Euclidean(d=2, process='brownian')``: its keywords are the object's arguments).
"""

from __future__ import annotations

import re

#: Python keywords of the library whose command-line flag has another name
API_KEYWORDS = {"lr": "--learning-rate", "checkpoint_dir": "--checkpoints"}
#: flag names not rewritten: in the library ``n`` is many things (a sample count, a dimension, a row count)
NOT_REWRITTEN = ("n",)

_VALUE = r"('[^']*'|\"[^\"]*\"|[^\s,;)]+)"
_NOT_BEFORE = r"(?<![\w./\-'\":])"
_NOT_AFTER = r"(?![\w/\-]|\.\w)"


def flag_names() -> dict[str, str]:
    """{Python name: flag} over every command's declared flags, the spaces' options and :data:`API_KEYWORDS`."""
    from heatwalk.frontend import flags
    from heatwalk.frontend.options import declared_option_flags

    names = dict(API_KEYWORDS)
    for declared in (flags.fit_flags(), flags.sample_flags(), flags.evaluate_flags(), flags.demo_flags()):
        names.update({f.name: f.flag for f in declared if not f.positional})
    names.update(declared_option_flags())
    return {k: v for k, v in names.items() if k not in NOT_REWRITTEN}


def _as_flag(flag: str, value: str) -> str:
    if value == "True":
        return flag
    if len(value) >= 2 and value[0] == value[-1] and value[0] in "'\"":
        value = value[1:-1]
    return f"{flag} {value}"


#: a repr of a library object such as ``Euclidean(d=2, process='brownian')`` or a product of them (two levels of
#: parentheses): its keywords are the object's, not options, and are left as they are
_REPR = re.compile(r"\b[A-Z]\w*\((?:[^()]|\((?:[^()]|\([^()]*\))*\))*\)")


def for_command_line(message: str) -> str:
    """``message`` with the library's option names replaced by command-line flags (module docstring); reprs of
    objects (``Name(...)``) are kept as written."""
    out, last = [], 0
    for m in _REPR.finditer(message):
        out += [_rewrite(message[last:m.start()]), m.group(0)]
        last = m.end()
    return "".join(out + [_rewrite(message[last:])])


def _rewrite(message: str) -> str:
    names = flag_names()
    alternatives = "|".join(sorted(map(re.escape, names), key=len, reverse=True))
    message = re.sub(rf"{_NOT_BEFORE}({alternatives}) ?= ?{_VALUE}",
                     lambda m: _as_flag(names[m.group(1)], m.group(2)), message)
    underscored = "|".join(sorted((re.escape(n) for n in names if "_" in n), key=len, reverse=True))
    message = re.sub(rf"{_NOT_BEFORE}({underscored}){_NOT_AFTER}", lambda m: names[m.group(1)], message)
    message = re.sub(rf"(^|: )({alternatives}) (must|applies|needs)\b",
                     lambda m: f"{m.group(1)}{names[m.group(2)]} {m.group(3)}", message)
    return message
