"""The command line's options, declared once: argparse flags, their help (with defaults) and config-file keys.

Each command is a list of :class:`Flag`. :func:`add_flags` turns them into
argparse arguments whose help shows the default, the choices and the range; for ``fit``
the same names (with ``_``) are the keys of the TOML config file
(:mod:`heatwalk.frontend.config_file`), so every option can live in the file
and a flag given on the command line overrides it. Flags are parsed with
default ``None`` so that "given on the command line" is visible; the declared
defaults are applied after the config file.

Numbers have their admissible range declared here too (``minimum``,
``maximum``, ``open_minimum``, ``open_maximum``; floats are always required finite), and
:func:`apply_defaults` checks every value against it, so a value out of range
is refused before any work with a message naming the flag, e.g.
``--batch-size must be an integer in [1, 10000000], got 1000000000000``. The
options the spaces declare carry their ranges the same way
(:class:`heatwalk.spaces.Option`) and are checked by :func:`check_range` too.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Flag:
    """One option: ``name`` is the dest and the config key, the flag is ``--`` + name with ``-`` for ``_``."""

    name: str
    kind: type | None
    help: str
    default: Any = None
    choices: tuple | None = None
    metavar: str | None = None
    positional: bool = False
    nargs: str | None = None
    repeat: bool = False
    minimum: float | None = None
    maximum: float | None = None
    open_minimum: bool = False
    open_maximum: bool = False

    @property
    def flag(self) -> str:
        return "--" + self.name.replace("_", "-")


def _samplers() -> tuple:
    from heatwalk.samplers import SAMPLERS

    return tuple(SAMPLERS)


def _spaces() -> tuple:
    from heatwalk.spaces import SPACE_KINDS

    return tuple(k for k, cls in SPACE_KINDS.items() if cls.file_kind in ("table", "sequences"))


#: caps that keep a mistyped number from asking for unbounded memory or time (far above any real use)
MAX_SEED = 2**63 - 1
MAX_BATCH = 10**7
MAX_POINTS = 10**9
MAX_STEPS = 10**9
MAX_WIDTH = 2**16
MAX_DEPTH = 1024
MAX_THREADS = 4096


def _seed(help_text: str) -> Flag:
    return Flag("seed", int, help_text, default=0, minimum=0, maximum=MAX_SEED)


COMMON_DEVICE = Flag("device", str, "where to compute: cpu, cuda, cuda:N, mps or auto (a GPU when present)",
                     default="cpu", metavar="DEVICE")
THREADS = Flag("threads", int, "torch intra-op threads (default: torch's own choice, the number of physical cores "
               "or OMP_NUM_THREADS when set; torchrun sets 1 per process)", metavar="N", minimum=1,
               maximum=MAX_THREADS)
QUIET = Flag("quiet", bool, "no progress bars (for scripts; results and summaries still print on stdout)")
DEBUG = Flag("debug", bool, "on an unexpected error (a bug), also print the Python traceback, for a bug report")


def fit_flags() -> list[Flag]:
    return [
        Flag("data", str, "data file: a table of points (CSV, TSV, Parquet, NPZ) or sequences (FASTA, text)",
             positional=True, nargs="?"),
        Flag("config", str, "TOML file with any of these options (flags given here override it)", metavar="FILE"),
        Flag("dry_run", bool, "print the resolved configuration (TOML) and stop, reading and writing nothing"),
        Flag("space", str, "the state space", choices=_spaces()),
        Flag("columns", str, "data columns by name, in this order (other columns are ignored); default: every "
             "column but the labels", metavar="NAME,NAME"),
        Flag("delimiter", str, "cell separator of a text table (default: detected from , tab ; |)", metavar="CHAR"),
        Flag("out", str, "model folder to write", metavar="FOLDER"),
        Flag("overwrite", bool, "replace an existing model folder"),
        Flag("train_steps", int, "training steps (Adam); default: from the number of points, 3000 up to 1,000 "
             "points, then 3000·sqrt(n/1000) up to 18,000", metavar="N", minimum=1, maximum=MAX_STEPS),
        Flag("batch_size", int, "training batch size (the global batch across processes)", default=512, metavar="N",
             minimum=1, maximum=MAX_BATCH),
        Flag("learning_rate", float, "Adam learning rate, cosine-decayed to a tenth", default=2e-3, metavar="LR",
             minimum=0, open_minimum=True),
        Flag("hidden", int, "network width (default: 128, 256 from 8,000 points (residual network); sequences 64)",
             metavar="N", minimum=1, maximum=MAX_WIDTH),
        Flag("depth", int, "network depth (residual blocks, or hidden layers of the MLP; transformer layers for "
             "sequences)", metavar="N", minimum=1, maximum=MAX_DEPTH),
        _seed("seed of every random draw (same seed, same model)"),
        Flag("labels", str, "column holding a class name per row: fit a labelled model (for --label at sampling)",
             metavar="COLUMN"),
        Flag("label_dropout", float, "with --labels: fraction of rows trained without their label", default=0.1,
             metavar="P", minimum=0, maximum=1, open_maximum=True),
        Flag("inpainting", bool, "also train to condition on known coordinates (torus, R^d): exact --fix/--given"),
        Flag("checkpoints", str, "folder for periodic training checkpoints", metavar="FOLDER"),
        Flag("checkpoint_every", int, "steps between checkpoints", default=1000, metavar="N", minimum=1,
             maximum=MAX_STEPS),
        Flag("resume", bool, "continue from the checkpoint in --checkpoints"),
        COMMON_DEVICE,
        THREADS,
        QUIET,
        DEBUG,
    ]


def sample_flags() -> list[Flag]:
    return [
        Flag("model", str, "model folder written by 'heatwalk fit'", positional=True),
        Flag("n", int, "number of samples", metavar="N", minimum=1, maximum=MAX_POINTS),
        Flag("out", str, "file to write: .csv .tsv .parquet .npz (points), .fasta .txt (sequences)", metavar="FILE"),
        Flag("overwrite", bool, "replace an existing file"),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=500, metavar="N", minimum=1,
             maximum=MAX_STEPS),
        Flag("sampler", str, "sampler (default: the model's)", choices=_samplers()),
        _seed("seed of the sampler's draws"),
        Flag("label", str, "draw samples of this class (a model fitted with --labels)", metavar="NAME"),
        Flag("guidance", float, "classifier-free guidance weight with --label: 0 unconditional, 1 conditional, "
             "> 1 sharper", default=1.0, metavar="W", minimum=-1e6, maximum=1e6),
        Flag("given", str, "table of fixed values, columns named as in the data file (one row, or one per sample)",
             metavar="FILE"),
        Flag("fix", str, "fix one coordinate, e.g. --fix phi=-60 (units of the data file; repeatable)",
             metavar="NAME=VALUE", repeat=True),
        Flag("given_method", str, "how fixed coordinates are imposed (default: the model's best)",
             choices=("trained", "reconstruction", "replacement")),
        COMMON_DEVICE,
        THREADS,
        QUIET,
        DEBUG,
    ]


def evaluate_flags() -> list[Flag]:
    return [
        Flag("model", str, "model folder written by 'heatwalk fit'", positional=True),
        Flag("data", str, "held-out data in the format the model was fitted on", positional=True),
        Flag("out", str, "report folder (evaluation.json, evaluation.txt, pictures)", metavar="FOLDER"),
        Flag("overwrite", bool, "replace an existing report folder"),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=300, metavar="N", minimum=1,
             maximum=MAX_STEPS),
        Flag("sampler", str, "sampler (default: the model's)", choices=_samplers()),
        Flag("likelihood_points", int, "data points whose log-likelihood is computed (0: skip)", default=500,
             metavar="N", minimum=0, maximum=MAX_POINTS),
        Flag("per_point", bool, "also write each point's log-likelihood (or ELBO) to per_point.csv in the report "
             "folder"),
        _seed("seed of the split and of the sampler"),
        COMMON_DEVICE,
        THREADS,
        QUIET,
        DEBUG,
    ]


def plot_flags() -> list[Flag]:
    return [
        Flag("model", str, "model folder written by 'heatwalk fit': its density (or samples drawn from it), and the "
             "reading options and columns of --data and --samples", metavar="FOLDER"),
        Flag("data", str, "data file to draw (points over the density)", metavar="FILE"),
        Flag("samples", str, "samples file to draw (e.g. written by 'heatwalk sample')", metavar="FILE"),
        Flag("space", str, "the state space of --data / --samples when no --model is given", choices=_spaces()),
        Flag("columns", str, "data columns by name, in this order, without --model (with it: the model's columns)",
             metavar="NAME,NAME"),
        Flag("delimiter", str, "cell separator of a text table (default: detected from , tab ; |)", metavar="CHAR"),
        Flag("out", str, "picture to write: .png, .svg or .pdf", metavar="PICTURE"),
        Flag("overwrite", bool, "replace an existing picture"),
        Flag("losses", bool, "draw the model's training loss per step instead (needs --model)"),
        Flag("size", str, "width,height of the picture in pixels (default: chosen for the picture)", metavar="W,H"),
        Flag("dpi", int, "dots per inch (sets the size of text and lines relative to the pixels)", default=100,
             metavar="N", minimum=10, maximum=2400),
        Flag("title", str, "title above the picture (default: says what is drawn, from which files)", metavar="TEXT"),
        Flag("n_samples", int, "samples drawn from --model where the picture cannot show its density from log_prob",
             default=2000, metavar="N", minimum=1, maximum=MAX_POINTS),
        Flag("reverse_steps", int, "steps of the reverse-time sampler for those samples", default=300, metavar="N",
             minimum=1, maximum=MAX_STEPS),
        Flag("sampler", str, "sampler for those samples (default: the model's)", choices=_samplers()),
        _seed("seed of the sampler's draws"),
        COMMON_DEVICE,
        THREADS,
        QUIET,
        DEBUG,
    ]


def demo_flags() -> list[Flag]:
    return [
        Flag("out", str, "output folder", default="demo-output", metavar="FOLDER"),
        Flag("overwrite", bool, "replace an existing demo output folder"),
        Flag("train_steps", int, "training steps", default=3000, metavar="N", minimum=1, maximum=MAX_STEPS),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=300, metavar="N", minimum=1,
             maximum=MAX_STEPS),
        Flag("likelihood_points", int, "held-out points whose log-likelihood is computed (0: skip)", default=500,
             metavar="N", minimum=0, maximum=MAX_POINTS),
        _seed("seed"),
        THREADS,
        QUIET,
        DEBUG,
    ]


def add_flags(parser, flags: list[Flag]) -> None:
    """argparse arguments for ``flags`` (default None; help states the declared default and choices)."""
    for f in flags:
        text = f.help + (f" (default: {f.default})" if f.default is not None and f.kind is not bool else "")
        text += range_text(f)
        if f.positional:
            parser.add_argument(f.name, help=text, nargs=f.nargs, metavar=f.name.upper())
        elif f.kind is bool:
            parser.add_argument(f.flag, dest=f.name, action="store_true", default=None, help=text)
        elif f.repeat:
            parser.add_argument(f.flag, dest=f.name, action="append", default=None, metavar=f.metavar, help=text)
        else:
            parser.add_argument(f.flag, dest=f.name, type=f.kind, choices=f.choices, default=None,
                                metavar=f.metavar if f.choices is None else None, help=text)


def range_text(declared) -> str:
    """The declared range of a number flag or option as help text, e.g. "; range [1, 10000000]" ("" when none)."""
    lo, hi = declared.minimum, declared.maximum
    if declared.kind not in (int, float) or (lo is None and hi is None):
        return ""
    left = "(" if declared.open_minimum or lo is None else "["
    right = ")" if declared.open_maximum or hi is None else "]"
    return f"; range {left}{'-inf' if lo is None else f'{lo:g}' if declared.kind is float else lo}, " \
           f"{'inf' if hi is None else f'{hi:g}' if declared.kind is float else hi}{right}"


def apply_defaults(args, flags: list[Flag]) -> None:
    """Fill every option the user left unset with its declared default (False for switches), then check
    every number against its declared range (:func:`check_range`)."""
    for f in flags:
        if getattr(args, f.name, None) is None:
            setattr(args, f.name, False if f.kind is bool else f.default)
    for f in flags:
        check_range(f, getattr(args, f.name, None), args)


def check_range(declared, value, args=None):
    """``value`` of the flag or space option ``declared`` checked against its declared range; returns it.

    ``declared`` is a :class:`Flag` or a :class:`heatwalk.spaces.Option` (both have ``kind``, ``flag``,
    ``minimum``, ``maximum``, ``open_minimum``, ``open_maximum``). Floats must be finite; None (not given) passes. The error
    names the flag, or the config file and key when ``args`` says the value came from one (``args.config_origin``,
    set by :func:`heatwalk.frontend.config_file.merge_config`).
    """
    from heatwalk.checks import check_int, check_number

    if value is None or declared.kind not in (int, float):
        return value
    origin = getattr(args, "config_origin", {}).get(declared.name) if args is not None else None
    name = declared.flag if origin is None else f"{origin}: key {declared.name!r}"
    lo, hi = declared.minimum, declared.maximum
    if declared.kind is int:
        return check_int(name, value, minimum=lo, maximum=hi)
    return check_number(name, value, minimum=lo, maximum=hi, open_minimum=declared.open_minimum,
                        open_maximum=declared.open_maximum)
