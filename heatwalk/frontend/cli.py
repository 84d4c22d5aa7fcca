"""The ``heatwalk`` command line: demo, fit, sample, evaluate.

    heatwalk demo [--out DIR]
    heatwalk fit DATA --space torus --out MODEL_DIR [--degrees] [--steps N] ...
    heatwalk sample MODEL_DIR --n N --out SAMPLES [--sampler NAME] [--steps N]
    heatwalk evaluate MODEL_DIR DATA --out REPORT_DIR
    heatwalk plot [--model MODEL_DIR] [--data FILE] [--samples FILE] --out PICTURE.png [--losses]

The reading and writing flags come from the options the spaces declare
(:mod:`heatwalk.frontend.options`).

Exit statuses and what is printed on standard error (:func:`main`, the one
handler):

- 0: done;
- 2: bad input (unreadable or malformed data, wrong options, an output that may
  not be written, a usage error): one line ``heatwalk: error: ...`` naming the
  file, line and problem in the command line's words (flags, not Python
  keywords: :mod:`heatwalk.frontend.messages`); nothing written;
- 130 / 143: stopped by SIGINT (Ctrl-C) / SIGTERM: one line (with the checkpoint
  written, when a fit has checkpoints); unfinished outputs are not written;
- 1: an unexpected exception, a bug: one line naming it and asking to report
  it; the traceback too with ``--debug`` (accepted by every command);
- 141: the reader of standard output closed it (``| head``): nothing more is
  printed; files the command wrote are whole.
"""

from __future__ import annotations

import argparse
import sys
import traceback

from heatwalk.errors import InputError

#: exit statuses: 0 success, 1 a bug (an unexpected exception), 2 bad input; 130 SIGINT, 143 SIGTERM;
#: 141 (128 + SIGPIPE, the shell's convention) when the reader of standard output closed it
EXIT_BUG = 1
EXIT_BAD_INPUT = 2
EXIT_BROKEN_PIPE = 141


class _Parser(argparse.ArgumentParser):
    """argparse, with usage errors raised as InputError (one line, exit 2) instead of printed usage."""

    def error(self, message):
        raise InputError(f"{message} (see {self.prog} --help)")


EXAMPLES = {
    "demo": "heatwalk demo --out demo-output",
    "fit": "heatwalk fit torsions.csv --space torus --degrees --columns phi,psi --out torsion-model",
    "sample": "heatwalk sample torsion-model --n 5000 --out samples.csv --fix phi=-60",
    "evaluate": "heatwalk evaluate torsion-model heldout.csv --out torsion-report",
    "info": "heatwalk info torsion-model",
    "plot": "heatwalk plot --model torsion-model --data heldout.csv --out torsions.png   (also: --losses, "
            "--samples FILE, .svg / .pdf)",
}


def _add_command(sub, name: str, flags, add_space_flags=None):
    from heatwalk.frontend.flags import add_flags

    p = sub.add_parser(name, help=COMMANDS[name], description=COMMANDS[name] + ".",
                       epilog=f"example: {EXAMPLES[name]}" if name in EXAMPLES else None)
    add_flags(p, flags)
    if add_space_flags is not None:
        add_space_flags(p)
    p.set_defaults(func=name)
    return p


def _add_torsions_parser(sub) -> None:
    from heatwalk.frontend.flags import DEBUG, add_flags

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
    add_flags(t, [DEBUG])
    t.set_defaults(func="torsions")


def _plot_option_flags(parser) -> None:
    from heatwalk.frontend.options import add_picture_option_flags, add_space_option_flags

    add_space_option_flags(parser)
    add_picture_option_flags(parser)


def build_parser() -> argparse.ArgumentParser:
    from heatwalk.frontend import flags
    from heatwalk.frontend.options import add_space_option_flags

    p = _Parser(prog="heatwalk", description="Diffusion models on manifolds and finite state "
                "spaces with exact heat kernels.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    _add_command(sub, "demo", flags.demo_flags())
    _add_command(sub, "fit", flags.fit_flags(), add_space_option_flags)
    _add_command(sub, "sample", flags.sample_flags(), add_space_option_flags)
    _add_command(sub, "evaluate", flags.evaluate_flags(), add_space_option_flags)
    _add_torsions_parser(sub)
    _add_command(sub, "plot", flags.plot_flags(), _plot_option_flags)
    i = sub.add_parser("info", help=COMMANDS["info"], epilog=f"example: {EXAMPLES['info']}")
    i.add_argument("model", help="model folder written by 'heatwalk fit'")
    flags.add_flags(i, [flags.DEBUG])
    i.set_defaults(func="info")
    return p


COMMANDS = {
    "demo": "fit and sample the built-in invented torsion-angle scenario",
    "fit": "fit a model to a data file",
    "sample": "draw samples from a fitted model",
    "evaluate": "report log-likelihood and sample metrics of a model on data",
    "torsions": "compute backbone (and side-chain) torsion angles of protein structures as a table",
    "info": "print the summary of a saved model: space, data, training, where it was written",
    "plot": "draw a model, a data file, a samples file (or two of them together), or a model's loss curve",
}


def _top_level_parser() -> argparse.ArgumentParser:
    """The parser of ``heatwalk [--help | --version]``: command names only, so it needs no torch."""
    from heatwalk import __version__

    p = _Parser(prog="heatwalk", description="Diffusion models on manifolds and finite state spaces with exact "
                "heat kernels.", epilog="Run 'heatwalk COMMAND --help' for a command's options.")
    p.add_argument("--version", action="version", version=f"heatwalk {__version__}")
    p.add_argument("--debug", action="store_true", help="on an unexpected error (a bug), also print the Python "
                   "traceback; accepted by every command (heatwalk --debug COMMAND ... or COMMAND ... --debug)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, text in COMMANDS.items():
        sub.add_parser(name, help=text, add_help=False)
    return p


def _command(name: str):
    from heatwalk.frontend import commands, demo, picture_command

    return {"demo": demo.cmd_demo, "fit": commands.cmd_fit, "sample": commands.cmd_sample,
            "evaluate": commands.cmd_evaluate, "torsions": commands.cmd_torsions, "info": commands.cmd_info,
            "plot": picture_command.cmd_plot}[name]


def _parse_and_run(argv: list[str]) -> int:
    if not argv or argv[0] not in COMMANDS:
        _top_level_parser().parse_args(argv)  # --help, --version, or an error naming the commands
        raise InputError("choose a command: " + ", ".join(COMMANDS) + " (see heatwalk --help)")
    args = build_parser().parse_args(argv)
    return _command(args.func)(args)


def _wants_debug(argv: list[str]) -> bool:
    """``--debug`` among the options (before a ``--`` that ends them)."""
    return "--debug" in (argv[: argv.index("--")] if "--" in argv else argv)


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def main(argv=None) -> int:
    """Run one command; returns the exit status (module docstring: 0, 1, 2, 130, 143).

    The one place where every failure becomes one line on standard error: :class:`InputError` (bad input,
    a usage error) ``heatwalk: error: ...`` with status 2; a SIGINT or SIGTERM (made a KeyboardInterrupt
    here by :func:`heatwalk.core.interrupts.terminate_as_interrupt`) one line and status 130 / 143; any other
    exception, a bug, one line naming it with "please report this" and status 1, its traceback only with
    ``--debug``. Warnings print as one line each (:func:`heatwalk.notices.one_line_warnings`). The signal
    handler and warning settings in force before are restored on return.
    """
    import signal
    import warnings

    from heatwalk.core.interrupts import exit_status, terminate_as_interrupt
    from heatwalk.notices import one_line_warnings

    argv = list(sys.argv[1:] if argv is None else argv)
    if len(argv) > 1 and argv[0] == "--debug":  # heatwalk --debug COMMAND ...: the command's own flag
        argv = [argv[1], "--debug", *argv[2:]]
    debug = _wants_debug(argv)
    previous_sigterm = signal.getsignal(signal.SIGTERM)
    with warnings.catch_warnings():
        one_line_warnings()
        terminate_as_interrupt()
        try:
            return _parse_and_run(argv)
        except InputError as e:
            from heatwalk.frontend.messages import for_command_line

            print(f"heatwalk: error: {_one_line(for_command_line(str(e)))}", file=sys.stderr)
            return EXIT_BAD_INPUT
        except KeyboardInterrupt as e:
            said = _one_line(str(e)) or "interrupted (SIGINT)"
            print(f"heatwalk: {said}; unfinished outputs were not written", file=sys.stderr)
            return exit_status(e)
        except BrokenPipeError:
            # the reader of standard output closed it (``heatwalk info MODEL | head -1``): what the command
            # writes to files is already whole (atomic writes); stop quietly, as a pipeline expects, with the
            # shell's status for SIGPIPE, and point stdout at /dev/null so that the interpreter's own flush
            # at exit does not fail again (the practice the Python documentation gives for SIGPIPE)
            import os

            try:
                os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            except (OSError, ValueError, AttributeError):  # stdout without a file descriptor (e.g. captured)
                pass
            return EXIT_BROKEN_PIPE
        except Exception as e:  # a bug: every expected failure is an InputError
            if debug:
                traceback.print_exc(file=sys.stderr)
            hint = "" if debug else "; rerun with --debug for the traceback"
            print(f"heatwalk: error: unexpected {type(e).__name__}: {_one_line(e) or '(no message)'} "
                  f"(a bug in heatwalk: please report this, with the command{hint})", file=sys.stderr)
            return EXIT_BUG
        finally:
            if previous_sigterm is not None and signal.getsignal(signal.SIGTERM) is not previous_sigterm:
                try:
                    signal.signal(signal.SIGTERM, previous_sigterm)
                except ValueError:  # not the main thread: terminate_as_interrupt left the handler alone
                    pass


if __name__ == "__main__":
    sys.exit(main())
