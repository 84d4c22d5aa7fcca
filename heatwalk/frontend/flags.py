"""The command line's options, declared once: argparse flags, their help (with defaults) and config-file keys.

Each command is a list of :class:`Flag`. :func:`add_flags` turns them into
argparse arguments whose help shows the default and the choices; for ``fit``
the same names (with ``_``) are the keys of the TOML config file
(:mod:`heatwalk.frontend.config_file`), so every option can live in the file
and a flag given on the command line overrides it. Flags are parsed with
default ``None`` so that "given on the command line" is visible; the declared
defaults are applied after the config file.
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

    @property
    def flag(self) -> str:
        return "--" + self.name.replace("_", "-")


def _samplers() -> tuple:
    from heatwalk.samplers import SAMPLERS

    return tuple(SAMPLERS)


def _spaces() -> tuple:
    from heatwalk.spaces import SPACE_KINDS

    return tuple(k for k, cls in SPACE_KINDS.items() if cls.file_kind in ("table", "sequences")
                 and k not in ("product",))


COMMON_DEVICE = Flag("device", str, "where to compute: cpu, cuda, cuda:N, mps or auto (a GPU when present)",
                     default="cpu", metavar="DEVICE")
QUIET = Flag("quiet", bool, "no progress bars (for scripts; results and summaries still print on stdout)")


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
        Flag("train_steps", int, "training steps (Adam); default: from the number of points, 3000 up to 4,000 "
             "points, then 3000·sqrt(n/4000) up to 12,000", metavar="N"),
        Flag("batch_size", int, "training batch size (the global batch across processes)", default=512, metavar="N"),
        Flag("learning_rate", float, "Adam learning rate, cosine-decayed to a tenth", default=2e-3, metavar="LR"),
        Flag("hidden", int, "network width (default: manifolds 256, 512 from 8,000 points; sequences 64)",
             metavar="N"),
        Flag("depth", int, "network depth (hidden layers; transformer layers for sequences)", metavar="N"),
        Flag("seed", int, "seed of every random draw (same seed, same model)", default=0),
        Flag("labels", str, "column holding a class name per row: fit a labelled model (for --label at sampling)",
             metavar="COLUMN"),
        Flag("label_dropout", float, "with --labels: fraction of rows trained without their label", default=0.1,
             metavar="P"),
        Flag("inpainting", bool, "also train to condition on known coordinates (torus, R^d): exact --fix/--given"),
        Flag("checkpoints", str, "folder for periodic training checkpoints", metavar="FOLDER"),
        Flag("checkpoint_every", int, "steps between checkpoints", default=1000, metavar="N"),
        Flag("resume", bool, "continue from the checkpoint in --checkpoints"),
        COMMON_DEVICE,
        Flag("threads", int, "torch intra-op threads (default: torch's own choice)", metavar="N"),
        QUIET,
    ]


def sample_flags() -> list[Flag]:
    return [
        Flag("model", str, "model folder written by 'heatwalk fit'", positional=True),
        Flag("n", int, "number of samples", metavar="N"),
        Flag("out", str, "file to write: .csv .tsv .parquet .npz (points), .fasta .txt (sequences)", metavar="FILE"),
        Flag("overwrite", bool, "replace an existing file"),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=500, metavar="N"),
        Flag("sampler", str, "sampler (default: the model's)", choices=_samplers()),
        Flag("seed", int, "seed of the sampler's draws", default=0),
        Flag("label", str, "draw samples of this class (a model fitted with --labels)", metavar="NAME"),
        Flag("guidance", float, "classifier-free guidance weight with --label: 0 unconditional, 1 conditional, "
             "> 1 sharper", default=1.0, metavar="W"),
        Flag("given", str, "table of fixed values, columns named as in the data file (one row, or one per sample)",
             metavar="FILE"),
        Flag("fix", str, "fix one coordinate, e.g. --fix phi=-60 (units of the data file; repeatable)",
             metavar="NAME=VALUE", repeat=True),
        Flag("given_method", str, "how fixed coordinates are imposed (default: the model's best)",
             choices=("trained", "reconstruction", "replacement")),
        COMMON_DEVICE,
        QUIET,
    ]


def evaluate_flags() -> list[Flag]:
    return [
        Flag("model", str, "model folder written by 'heatwalk fit'", positional=True),
        Flag("data", str, "held-out data in the format the model was fitted on", positional=True),
        Flag("out", str, "report folder (evaluation.json, evaluation.txt, a picture)", metavar="FOLDER"),
        Flag("overwrite", bool, "replace an existing report folder"),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=300, metavar="N"),
        Flag("sampler", str, "sampler (default: the model's)", choices=_samplers()),
        Flag("likelihood_points", int, "data points whose log-likelihood is computed (0: skip)", default=500,
             metavar="N"),
        Flag("per_point", str, "also write each point's log-likelihood to this table (.csv, .tsv, .parquet)",
             metavar="FILE"),
        Flag("seed", int, "seed of the split and of the sampler", default=0),
        COMMON_DEVICE,
        QUIET,
    ]


def demo_flags() -> list[Flag]:
    return [
        Flag("out", str, "output folder", default="demo-output", metavar="FOLDER"),
        Flag("train_steps", int, "training steps", default=3000, metavar="N"),
        Flag("reverse_steps", int, "steps of the reverse-time sampler", default=300, metavar="N"),
        Flag("seed", int, "seed", default=0),
        QUIET,
    ]


def add_flags(parser, flags: list[Flag]) -> None:
    """argparse arguments for ``flags`` (default None; help states the declared default and choices)."""
    for f in flags:
        text = f.help + (f" (default: {f.default})" if f.default is not None and f.kind is not bool else "")
        if f.positional:
            parser.add_argument(f.name, help=text, nargs=f.nargs, metavar=f.name.upper())
        elif f.kind is bool:
            parser.add_argument(f.flag, dest=f.name, action="store_true", default=None, help=text)
        elif f.repeat:
            parser.add_argument(f.flag, dest=f.name, action="append", default=None, metavar=f.metavar, help=text)
        else:
            parser.add_argument(f.flag, dest=f.name, type=f.kind, choices=f.choices, default=None,
                                metavar=f.metavar if f.choices is None else None, help=text)


def apply_defaults(args, flags: list[Flag]) -> None:
    """Fill every option the user left unset with its declared default (False for switches)."""
    for f in flags:
        if getattr(args, f.name, None) is None:
            setattr(args, f.name, False if f.kind is bool else f.default)
