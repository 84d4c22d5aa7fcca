"""The ``heatwalk`` command line: demo, fit, sample, evaluate.

    heatwalk demo [--out DIR]
    heatwalk fit DATA --space torus --out MODEL_DIR [--degrees] [--steps N] ...
    heatwalk sample MODEL_DIR --n N --out SAMPLES [--sampler NAME] [--steps N]
    heatwalk evaluate MODEL_DIR DATA --out REPORT_DIR

The reading and writing flags come from the options the spaces declare
(:mod:`heatwalk.frontend.options`). Bad input (unreadable or malformed data,
wrong options) prints one line ``heatwalk: error: ...`` naming the file, line
and problem, writes nothing, and exits with status 2.
"""

from __future__ import annotations

import argparse
import sys

from heatwalk.errors import InputError

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse, with usage errors raised as InputError (one line, exit 2) instead of printed usage."""

    def error(self, message):
        raise InputError(f"{message} (see {self.prog} --help)")


def _add_fit_parser(sub, add_flags) -> None:
    from heatwalk.spaces import SPACE_KINDS

    f = sub.add_parser("fit", help="fit a model to a data file")
    f.add_argument("data", help="CSV of points (one per line), or FASTA / text of sequences")
    f.add_argument("--space", required=True, help="the state space: " + ", ".join(SPACE_KINDS))
    f.add_argument("--out", required=True, help="model folder to write")
    f.add_argument("--overwrite", action="store_true", help="replace an existing model folder")
    f.add_argument("--steps", type=int, default=3000, help="training steps (default 3000)")
    f.add_argument("--batch-size", type=int, default=512)
    f.add_argument("--learning-rate", type=float, default=2e-3)
    f.add_argument("--hidden", type=int, help="network width (default: the objective's, 256 for manifolds)")
    f.add_argument("--depth", type=int, help="network depth (hidden layers; transformer layers for sequences)")
    f.add_argument("--seed", type=int, default=0)
    f.add_argument("--checkpoints", help="folder for periodic training checkpoints")
    f.add_argument("--checkpoint-every", type=int, default=1000)
    f.add_argument("--resume", action="store_true", help="continue from the checkpoint in --checkpoints")
    f.add_argument("--quiet", action="store_true", help="no progress bars")
    add_flags(f)
    f.set_defaults(func="fit")


def _add_sample_and_evaluate_parsers(sub, add_flags) -> None:
    s = sub.add_parser("sample", help="draw samples from a fitted model")
    s.add_argument("model", help="model folder written by 'heatwalk fit'")
    s.add_argument("--n", type=int, required=True, help="number of samples")
    s.add_argument("--out", required=True, help="file to write (CSV; FASTA/text for sequences)")
    s.add_argument("--overwrite", action="store_true")
    s.add_argument("--steps", type=int, default=500, help="reverse steps")
    s.add_argument("--sampler", help="sampler name (default: the model's)")
    s.add_argument("--seed", type=int, default=0)
    s.add_argument("--quiet", action="store_true")
    add_flags(s)
    s.set_defaults(func="sample")
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
    add_flags(e)
    e.set_defaults(func="evaluate")


def _add_torsions_parser(sub) -> None:
    t = sub.add_parser("torsions", help=COMMANDS["torsions"], description="One row per protein residue (per frame "
                       "of a trajectory) with structure, frame, chain, residue_number, insertion_code, residue_name "
                       "and phi, psi, omega (degrees); chain ends and gaps are left out unless --keep-incomplete. "
                       "Needs the data extra (MDAnalysis).",
                       epilog="example: heatwalk torsions 1abc.pdb 2xyz.cif --chi --out torsions.csv && "
                              "heatwalk fit torsions.csv --space torus --degrees --columns phi,psi --out model")
    t.add_argument("structures", nargs="+", metavar="FILE", help="PDB / mmCIF files, or trajectory files with "
                   "--topology")
    t.add_argument("--topology", help="topology file (e.g. PSF) for trajectory files (e.g. DCD, XTC)")
    t.add_argument("--chi", action="store_true", help="also side-chain angles chi1..chi5 (empty where undefined)")
    t.add_argument("--keep-incomplete", action="store_true",
                   help="keep residues whose phi or psi is undefined (chain ends, gaps), with empty cells")
    t.add_argument("--out", required=True, help="table to write: .csv, .tsv or .parquet")
    t.add_argument("--overwrite", action="store_true", help="replace an existing table")
    t.add_argument("--quiet", action="store_true", help="no progress bar")
    t.set_defaults(func="torsions")


def build_parser() -> argparse.ArgumentParser:
    from heatwalk.frontend.options import add_space_option_flags

    p = _Parser(prog="heatwalk", description="Diffusion models on manifolds and finite state "
                "spaces with exact heat kernels.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    d = sub.add_parser("demo", help="fit and sample the built-in invented torsion-angle scenario")
    d.add_argument("--out", default="demo-output", help="output folder (default: demo-output)")
    d.add_argument("--steps", type=int, default=3000, help="training steps (default 3000)")
    d.add_argument("--sample-steps", type=int, default=300, help="reverse steps when sampling (default 300)")
    d.add_argument("--seed", type=int, default=0)
    d.add_argument("--quiet", action="store_true", help="no progress bars")
    d.set_defaults(func="demo")
    _add_fit_parser(sub, add_space_option_flags)
    _add_sample_and_evaluate_parsers(sub, add_space_option_flags)
    _add_torsions_parser(sub)
    return p


COMMANDS = {
    "demo": "fit and sample the built-in invented torsion-angle scenario",
    "fit": "fit a model to a data file",
    "sample": "draw samples from a fitted model",
    "evaluate": "report log-likelihood and sample metrics of a model on data",
    "torsions": "compute backbone (and side-chain) torsion angles of protein structures as a table",
}


def _top_level_parser() -> argparse.ArgumentParser:
    """The parser of ``heatwalk [--help | --version]``: command names only, so it needs no torch."""
    from heatwalk import __version__

    p = _Parser(prog="heatwalk", description="Diffusion models on manifolds and finite state spaces with exact "
                "heat kernels.", epilog="Run 'heatwalk COMMAND --help' for a command's options.")
    p.add_argument("--version", action="version", version=f"heatwalk {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, text in COMMANDS.items():
        sub.add_parser(name, help=text, add_help=False)
    return p


def _command(name: str):
    from heatwalk.frontend import commands, demo

    return {"demo": demo.cmd_demo, "fit": commands.cmd_fit, "sample": commands.cmd_sample,
            "evaluate": commands.cmd_evaluate, "torsions": commands.cmd_torsions}[name]


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        if not argv or argv[0] not in COMMANDS:
            args = _top_level_parser().parse_args(argv)  # --help, --version, or an error naming the commands
            raise InputError("choose a command: " + ", ".join(COMMANDS) + " (see heatwalk --help)")
        args = build_parser().parse_args(argv)
        return _command(args.func)(args)
    except InputError as e:
        print(f"heatwalk: error: {e}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("heatwalk: interrupted; nothing more was written", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
