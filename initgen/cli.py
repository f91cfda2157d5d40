"""Command line: a thin argparse layer over initgen.api.

Exit codes: 0 done; 2 bad input (recipe, layout, file, arguments) with a one-line message;
3 ``compare`` found differences outside the allowed variables (or ``verify`` found a mismatch);
1 an unexpected error (a bug: please report it with the traceback that ``--debug`` shows);
130 interrupted (SIGINT, SIGTERM or SIGHUP; what was being written is removed, finished ensemble
members are kept and ``--resume`` continues).

Output policy, the same for every command (:func:`_check_outputs`, over ``initgen.io.targets``):
every path a command will write is checked before any work starts; an existing file is refused
unless ``--force``; a missing or unwritable folder is refused naming it (exit 2); nothing is
created before the checks pass, and every file is written through a temporary file and a rename.
``-q`` prints nothing but errors, and a count of the warnings held back.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import signal
import sys
import threading
import warnings
from pathlib import Path

from tqdm import tqdm

from initgen import api, demo
from initgen._version import __version__
from initgen.config.recipe import LAYOUT, RECIPE, load_recipe
from initgen.engine.persistence import line as persistence_line
from initgen.errors import InputError, InputWarning
from initgen.io.atomic import check_output_path, write_atomic_text
from initgen.io.targets import file_target, folder_target
from initgen.outputs.collate import FILES as COLLATION_FILES, problems_text
from initgen.outputs.ensemble import Interrupted
from initgen.outputs.manifest import members_table, results_table
from initgen.outputs.members import input_stem, select
from initgen.outputs.provenance import provenance_path
from initgen.reports.compare import compare, compare_report, compare_text
from initgen.reports.mask import write_mask
from initgen.reports.preview import preview_report
from initgen.reports.verify import verify


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2
        self.exit(2, f"initgen: error: {message} (see 'initgen {self.prog.split()[-1]} --help')\n"
                  if " " in self.prog else f"initgen: error: {message} (see 'initgen --help')\n")


def _common(p, input_required=True, layout=True, many_inputs=False):
    p.add_argument("recipe", help="recipe YAML file")
    if many_inputs:
        p.add_argument("--input", "-i", required=True, nargs="+", metavar="FILE",
                       help="restart / initial-condition netCDF file(s); several (start dates) for an "
                       "ensemble, or a model's tiles")
    elif input_required is not None:
        p.add_argument("--input", "-i", required=input_required, help="restart / initial-condition netCDF file")
    if layout:
        p.add_argument("--layout", "-l", help="layout YAML file (default: the recipe's inline layout, else CF attributes)")
    p.add_argument("--allow-outside-paths", action="store_true",
                   help="let the recipe name files outside its own folder")


def _quiet(p):
    p.add_argument("--quiet", "-q", action="store_true",
                   help="print nothing but errors (and how many warnings were held back)")


def _force(p):
    p.add_argument("--force", action="store_true", help="replace existing outputs")


def build_parser() -> argparse.ArgumentParser:
    ap = _Parser(prog="initgen", description="Perturb land-surface initial states over a region, with physics "
                 "limits and provenance.")
    ap.add_argument("--version", action="version", version=f"initgen {__version__}")
    ap.add_argument("--debug", action="store_true", help="show tracebacks for unexpected errors")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("check", help="validate a recipe (and layout, and their fit to an input file); writes nothing")
    _common(p, input_required=False)
    _quiet(p)

    p = sub.add_parser("apply", help="write a perturbed copy of the input and its provenance record "
                       "(with members: every member for every input, into a folder)")
    _common(p, many_inputs=True)
    p.add_argument("--output", "-o", required=True, help="output netCDF file (never the input); for a recipe with "
                   "members, the output folder (files named by members.output_template, plus manifest.json/.csv); for "
                   "several inputs (tiles) without members, a folder or a template such as 'out/{input_stem}-p.nc'")
    p.add_argument("--member", metavar="NAME", help="write only this member, to the --output file")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes for members (default min(2, CPUs))")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run members on this Dask distributed scheduler "
                   "(e.g. tcp://host:8786; needs initgen[dask] and a file system the workers share)")
    p.add_argument("--force", action="store_true", help="replace existing outputs")
    p.add_argument("--resume", action="store_true", help="finish an interrupted or partly failed ensemble in the "
                   "--output folder: keep members whose output and record match, write the others")
    _quiet(p)
    p.add_argument("--verbose", "-v", action="store_true", help="also print the time spent per stage")
    p.add_argument("--repack", action="store_true",
                   help="rewrite the output whole so compressed chunks are packed afresh (smaller, slower)")

    p = sub.add_parser("preview", help="dry run: show what apply would change; writes no netCDF file")
    _common(p)
    p.add_argument("--json", help="write the ledger as JSON to this file")
    p.add_argument("--report", help="write report.html (one self-contained page with the figures) and a Markdown "
                   "report with PNG figures into this folder")
    p.add_argument("--member", metavar="NAME",
                   help="preview only this member (for a recipe with members: default all, one row each)")
    _force(p)
    _quiet(p)

    p = sub.add_parser("mask", help="write the horizontal weight field on the model grid (netCDF, optional PNG)")
    _common(p)
    p.add_argument("--output", "-o", required=True, help="output mask netCDF file")
    p.add_argument("--png", help="also draw a map of the weights to this PNG file")
    _force(p)
    _quiet(p)

    p = sub.add_parser("compare", help="structural and value diff of two netCDF files",
                       usage="initgen compare A B [--allow VAR ...] [--layout LAYOUT] [--json FILE] [--report DIR]")
    p.add_argument("a", nargs="?", help="first file (e.g. the original)")
    p.add_argument("b", nargs="?", help="second file (e.g. the perturbed copy)")
    p.add_argument("--allow", nargs="*", default=[], action="extend", metavar="VAR",
                   help="variables allowed to differ (before or after the two files)")
    p.add_argument("--layout", "-l", help="layout YAML (for cell areas and the layer axis)")
    p.add_argument("--json", help="write the differences as JSON to this file")
    p.add_argument("--report", help="write report.html (one self-contained page) and compare.md into this folder")
    _force(p)
    _quiet(p)

    p = sub.add_parser("verify", help="re-run a provenance record and check the output matches it (all but the history line)")
    p.add_argument("provenance", help="the .provenance.json written by apply")
    p.add_argument("--input", "-i", help="the original input file (default: beside the record as recorded, "
                   "else the recorded absolute path)")
    p.add_argument("--output", "-o", help="the file to check (default: the file the record sits beside)")
    p.add_argument("--recipe", help="the recipe (default: beside the record, else its recorded path, else the "
                   "recipe text stored in the record)")
    p.add_argument("--layout", "-l", help="the layout (default: as for --recipe)")
    _quiet(p)

    p = sub.add_parser("collate", help="compare several groups' provenance records side by side (CSV, JSON, HTML)")
    p.add_argument("records", nargs="+", metavar="RECORD_OR_FOLDER",
                   help="provenance records (.provenance.json), ensemble manifest.json files or folders of them")
    p.add_argument("--out", required=True, help="folder for collation.csv, collation.json and collation.html")
    p.add_argument("--label", action="append", default=[], metavar="NAME=RECORD", help="name a submission")
    p.add_argument("--threshold", type=float, default=0.25,
                   help="flag band means further than this fraction from the median (default 0.25)")
    _force(p)
    _quiet(p)

    p = sub.add_parser("schema", help="print the JSON Schema of the recipe (or of the layout)")
    p.add_argument("--layout", action="store_true", help="print the layout schema instead")
    _quiet(p)

    p = sub.add_parser("demo", help="run the built-in demo (an invented highland) into a folder")
    p.add_argument("--out", required=True, help="folder to write the demo into (created if needed; an existing "
                   "folder that is not empty is refused unless --force)")
    _force(p)
    _quiet(p)
    for p in sub.choices.values():  # '--debug' is also accepted after the command
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    return ap


def _files_after_allow(parser, args) -> None:
    """``compare --allow V1 V2 A B``: argparse read the files as variables; the last names, if files, are A and B."""
    if args.command != "compare":
        return
    files = [f for f in (args.a, args.b) if f is not None]
    need = 2 - len(files)
    if not need:
        return
    tail = args.allow[len(args.allow) - need:] if len(args.allow) >= need else []
    missing = [t for t in tail if not os.path.isfile(t)]
    if not tail or missing:
        why = f" ('{missing[-1]}' after --allow is not a file)" if missing else ""
        parser.exit(2, f"initgen: error: compare needs two files, A and B{why} (see 'initgen compare --help')\n")
    files += tail
    del args.allow[len(args.allow) - need:]
    args.a, args.b = files


def _warn_line(message, category, filename, lineno, file=None, line=None):
    return f"initgen: warning: {message}\n"


class _Bar(tqdm):
    """tqdm without its monitor thread (a thread that would be alive when an ensemble forks its workers)."""

    monitor_interval = 0


def _terminal_size(stream) -> tuple[int, int]:
    """Columns and rows of the terminal ``stream`` writes to; 80 x 24 where it reports none.

    A pseudo-terminal whose size was never set reports 0 x 0; tqdm then takes -1 columns and -1
    rows (one less than reported) and draws nothing at all, as no line fits in -1 rows."""
    try:
        cols, rows = os.get_terminal_size(stream.fileno())
    except (AttributeError, OSError, ValueError):
        cols, rows = 0, 0
    return (cols if cols > 0 else 80), (rows if rows > 0 else 24)


class _Progress:
    """The one progress line (tqdm) for what the API reports as ``progress(done, total)`` (apply's
    blocks) or ``progress(done, total, failed)`` (an ensemble's members): ``[####......] 3/10
    blocks``, with ``, 1 failed`` once a member failed; a newline when all are done."""

    def __init__(self, stream, unit: str):
        self.stream, self.unit, self.bar = stream, unit, None

    def __call__(self, done: int, total: int, failed: int = 0) -> None:
        if self.bar is None:
            cols, rows = _terminal_size(self.stream)
            # the counts always show: on a narrow terminal the bar (30 cells at most) gives way first
            tail = f" {total}/{total} {self.unit}" + (f", {total} failed" if self.unit == "members done" else "")
            width = max(1, min(30, cols - 1 - 2 - len(tail)))
            # ncols one short of the width (as tqdm does), so the line never wraps
            self.bar = _Bar(total=total, file=self.stream, ncols=cols - 1, nrows=rows, ascii=".#", leave=True,
                            bar_format="[{bar:%d}] {n_fmt}/{total_fmt} " % width + self.unit + "{postfix}")
        if failed:
            self.bar.set_postfix_str(f"{failed} failed", refresh=False)
        self.bar.update(done - self.bar.n)
        if done >= total:  # a new bar for whatever comes next (the next tile of a tile set)
            self.close(finished=True)
            self.bar = None

    def close(self, finished: bool) -> None:
        """Finished: the last state stays, with a newline. Stopped (an error or an interrupt): the
        line is cleared, so the message that follows starts at the left margin."""
        if self.bar is not None and not self.bar.disable:
            self.bar.leave = finished
            self.bar.close()
            self.stream.flush()


@contextlib.contextmanager
def _progress(quiet: bool, unit: str):
    """The progress callback for the API (None with ``-q`` or when stderr is not a terminal)."""
    if quiet or not sys.stderr.isatty():
        yield None
        return
    shown = _Progress(sys.stderr, unit)
    try:
        yield shown
    except BaseException:
        shown.close(finished=False)
        raise
    shown.close(finished=True)


def _show_warnings(caught, quiet: bool = False) -> None:
    """Print each distinct warning once, one line each (apply validates twice: no repeats); with
    ``quiet`` only their number."""
    seen = set()
    shown = 0
    for w in caught:
        if issubclass(w.category, (DeprecationWarning, PendingDeprecationWarning, ImportWarning, ResourceWarning)):
            continue
        text = " ".join(str(w.message).split())
        if (w.category, text) in seen:
            continue
        seen.add((w.category, text))
        shown += 1
        if quiet:
            continue
        if issubclass(w.category, InputWarning):
            sys.stderr.write(f"initgen: warning: {text}\n")
        else:
            sys.stderr.write(warnings.formatwarning(w.message, w.category, w.filename, w.lineno))
    if quiet and shown:
        sys.stderr.write(f"initgen: {shown} warning(s) held back by -q; run without -q to read them\n")


def main(argv=None) -> int:
    warnings.formatwarning = _warn_line
    parser = build_parser()
    args = parser.parse_args(argv)
    _files_after_allow(parser, args)
    if args.command is None:
        parser.print_help()
        return 2
    quiet = bool(getattr(args, "quiet", False))
    # Warnings are held back until the command ends: on success they are shown (once each); on
    # bad input only the one-line error is, since the run stopped before the warning mattered.
    # -q -v (apply): the asked-for timings line, and nothing else, on stdout
    hush = quiet and not getattr(args, "verbose", False)
    with warnings.catch_warnings(record=True) as caught, _interrupts_raise(), _stdout_unless(hush):
        warnings.simplefilter("always")
        try:
            code = _dispatch(args)
        except InputError as exc:
            msg = " ".join(str(exc).split())
            sys.stderr.write(f"initgen: error: {msg}\n")
            return 2
        except KeyboardInterrupt as exc:
            if isinstance(exc, Interrupted):
                sys.stderr.write(f"initgen: {exc.line()}\n")
            else:
                sys.stderr.write("initgen: interrupted; the output being written was removed and no other file "
                                 "was written\n")
            return 130
        except BrokenPipeError:
            return 0
        except Exception as exc:  # a bug: one line unless --debug
            _show_warnings(caught, quiet)
            if args.debug or os.environ.get("INITGEN_DEBUG"):
                raise
            sys.stderr.write(f"initgen: unexpected error: {exc.__class__.__name__}: {exc} "
                             "(run with --debug for the traceback and please report it)\n")
            return 1
    _show_warnings(caught, quiet)
    return code


@contextlib.contextmanager
def _interrupts_raise():
    """SIGTERM and SIGHUP end a command as Ctrl-C does (KeyboardInterrupt -> exit 130, one line),
    so that whatever is being written is cleaned up; the writers install their own handlers too."""

    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt(signal.Signals(signum).name)

    sigs = [s for s in (signal.SIGTERM, getattr(signal, "SIGHUP", None)) if s is not None]
    old = {s: signal.signal(s, handler) for s in sigs}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


@contextlib.contextmanager
def _stdout_unless(quiet: bool):
    """With -q the command's normal output goes nowhere; errors (stderr) still show."""
    if not quiet:
        yield
        return
    with open(os.devnull, "w") as sink, contextlib.redirect_stdout(sink):
        yield


def _same_file(a, b) -> bool:
    try:
        if os.path.exists(a) and os.path.exists(b):
            return os.path.samefile(a, b)
    except OSError:
        pass
    return os.path.abspath(a) == os.path.abspath(b)


def _guard_outputs(args) -> None:
    """No file the command writes may be one it reads (--json onto the input once replaced the restart file)."""
    def given(*names):
        out = []
        for n in names:
            v = getattr(args, n, None)
            out.extend(v if isinstance(v, list) else [v] if isinstance(v, str) and v else [])
        return out

    reads = given("recipe", "input", "layout", "a", "b", "provenance")
    pairs = [(w, r) for w in given("json", "png") for r in reads]
    # --output against the input is checked by the writer, with its own message
    outputs = given("output") if args.command in ("apply", "mask") else []
    if args.command == "apply" and outputs and not os.path.isdir(outputs[0]):
        outputs.append(outputs[0] + ".provenance.json")
    pairs += [(w, r) for w in outputs for r in given("recipe", "layout")]
    for w, r in pairs:
        if _same_file(w, r):
            raise InputError(f"{w}: is also an input of this command ({r}); initgen never overwrites its "
                             "inputs, choose another name")


# ---------------------------------------------------------------------------------------------
# The output policy: every target checked before any work starts
# ---------------------------------------------------------------------------------------------


def _targets_apply(args):
    if getattr(args, "_ensemble", False):  # the folder and its members: ensemble.check_output_folder
        return
    if args.resume and len(args.input) > 1:
        raise InputError("--resume: finishes an ensemble written into a folder; tiles are written all together "
                         "or not at all, so run the same command again without --resume")
    if args.resume:
        raise InputError("--resume: finishes an ensemble written into a folder; this run writes one file "
                         "(to replace it, pass --force)")
    if args.member is not None:  # a bad member name is the first thing to hear about
        select(load_recipe(args.recipe), [args.member])
    if len(args.input) > 1:  # tiles: one output each, none of them any input
        for _, out in _tile_outputs(args):
            for inp in args.input:
                check_output_path(Path(inp), out, args.force)
            file_target(out, "--output", args.force)
            file_target(provenance_path(out), "--output", args.force)
        return
    # the writer's own check: never the input, then folder and --force
    check_output_path(Path(args.input[0]), Path(args.output), args.force)
    file_target(args.output, "--output", args.force)
    file_target(provenance_path(Path(args.output)), "--output", args.force)


def _tile_outputs(args) -> list[tuple[Path, Path]]:
    """A recipe without members and several inputs (a model stored as tiles): (input, output)
    pairs, the output in the --output folder under the input's own name, or named by the --output
    template ({input_stem}, {input_name}, as in members.output_template)."""
    out = args.output
    if "{" in out:
        try:
            names = [out.format(input_stem=input_stem(Path(i)), input_name=Path(i).name) for i in args.input]
        except (KeyError, IndexError, ValueError):
            raise InputError(f"--output {out}: a template for several inputs takes the fields {{input_stem}} and "
                             "{input_name} only, e.g. 'out/{input_stem}-perturbed.nc'") from None
    elif os.path.isdir(out) or out.endswith(("/", os.sep)):
        names = [os.path.join(out, Path(i).name) for i in args.input]
    else:
        raise InputError(f"--output {out}: several inputs (a model stored as tiles) are written one output each; "
                         "give an existing folder, or a template naming each, e.g. 'out/{input_stem}-perturbed.nc' "
                         "(a recipe with a members section writes an ensemble instead)")
    if len({os.path.abspath(n) for n in names}) < len(names):
        raise InputError(f"--output {out}: gives the same output for two inputs; name each with {{input_stem}}")
    return [(Path(i), Path(n)) for i, n in zip(args.input, names)]


FILE, ANY = "file", "any"  # a file; a folder that must be empty (else: the files in it that need --force)

# command -> every path it writes, in the order checked: (argument, option, FILE or the folder's
# files that need --force, or ANY). apply's checks need more than a table: _targets_apply.
OUTPUTS = {"preview": (("json", "--json", FILE), ("report", "--report", ("preview.md", "report.html"))),
           "mask": (("output", "--output", FILE), ("png", "--png", FILE)),
           "compare": (("json", "--json", FILE), ("report", "--report", ("compare.md", "report.html"))),
           "demo": (("out", "--out", ANY),),
           "collate": (("out", "--out", COLLATION_FILES),)}


def _check_outputs(args) -> None:
    """The output policy (module docstring, io/targets.py): called before a command does any work."""
    if args.command == "apply":
        _targets_apply(args)
    for name, option, kind in OUTPUTS.get(args.command, ()):
        path = getattr(args, name)
        if not path:
            continue
        if kind == FILE:
            file_target(path, option, args.force)
        else:
            folder_target(path, option, args.force, files=() if kind == ANY else kind, any_file=kind == ANY)


def _cmd_check(args) -> int:
    res = api.check(args.recipe, args.layout, args.input, allow_outside_paths=args.allow_outside_paths)
    print(res.summary())
    return 0


def _cmd_apply(args) -> int:
    recipe = api.load_recipe(args.recipe)
    if recipe.data.get("members") and args.member is None:
        if Path(args.output).suffix.lower() in (".nc", ".nc4", ".cdf") and not Path(args.output).is_dir():
            raise InputError(f"--output {args.output}: the recipe has members, so the output is a folder; give a "
                             "folder name (or --member NAME to write one member to this file)")

        with _progress(args.quiet, "members done") as progress:
            res = api.apply_ensemble(recipe, args.input, args.output, args.layout, workers=args.workers,
                                     scheduler=args.scheduler, force=args.force, resume=args.resume,
                                     allow_outside_paths=args.allow_outside_paths, progress=progress)
        if not args.quiet:
            print(results_table(res))
        for r in res.failed:
            sys.stderr.write(f"initgen: error: member {r['member']['name']} of {r['input']}: {r['message']}\n")
        return res.exit_code
    if len(args.input) > 1:  # tiles: all written, or none (api.apply_tiles)
        pairs = _tile_outputs(args)
        with _progress(args.quiet, "blocks") as progress:
            api.apply_tiles(recipe, [i for i, _ in pairs], [o for _, o in pairs], args.layout, force=args.force,
                            allow_outside_paths=args.allow_outside_paths, progress=progress, repack=args.repack,
                            on_written=lambda out, rec: _say_written(args, out, rec))
        return 0
    if args.output.endswith(("/", os.sep)):
        raise InputError(f"--output {args.output}: names a folder; give the output file's name")
    with _progress(args.quiet, "blocks") as progress:
        rec = api.apply(recipe, args.input[0], args.output, args.layout, member=args.member, force=args.force,
                        allow_outside_paths=args.allow_outside_paths, progress=progress, repack=args.repack)
    _say_written(args, args.output, rec)
    return 0


def _say_written(args, output, rec) -> None:
    """Say what changed (the ledger) and what was written."""
    if not args.quiet:
        print(api.ledger_text(rec["ledger"]))
        print(f"wrote {output} (sha256 {rec['output']['sha256']})")
        print(f"wrote {output}.provenance.json")
    if args.verbose:
        io = rec.get("io", {})
        stages = ", ".join(f"{k[:-2]} {v:.2f} s" for k, v in io.get("timings_s", {}).items())
        print(f"timings: {stages}; {io.get('bytes_rewritten', 0):,} bytes rewritten; file size "
              f"{io.get('size_growth_bytes', 0):+,} bytes" + (" (repacked)" if io.get("repacked") else ""))


def _cmd_preview(args) -> int:
    recipe = api.load_recipe(args.recipe)
    if recipe.data.get("members") and args.member is None:
        if args.report:
            raise InputError("--report: the recipe has members; name one with --member NAME for a report")
        rows = api.preview_members(recipe, args.input, args.layout, allow_outside_paths=args.allow_outside_paths)
        print(members_table(rows))
        for m, led in rows:  # persistence.py: one line per member
            print(f"{m.name}: {persistence_line(led.get('persistence'))}")
        if args.json:
            data = {"members": [{"member": m.record(), "ledger": led} for m, led in rows]}
            write_atomic_text(Path(args.json), json.dumps(data, indent=2) + "\n")
            print(f"wrote {args.json}")
        return 0
    led = api.preview(recipe, args.input, args.layout, member=args.member,
                      allow_outside_paths=args.allow_outside_paths)
    print(api.ledger_text(led))
    if args.json:
        write_atomic_text(Path(args.json), json.dumps(led, indent=2) + "\n")
        print(f"wrote {args.json}")
    if args.report:
        path = preview_report(args.recipe, args.input, args.layout, Path(args.report), ledger=led,
                                     allow_outside_paths=args.allow_outside_paths, member=args.member)
        print(f"wrote {path.parent / 'report.html'} and {path}")
    return 0


def _cmd_mask(args) -> int:
    write_mask(args.recipe, args.input, args.layout, Path(args.output), png=args.png, force=args.force,
                      allow_outside_paths=args.allow_outside_paths)
    print(f"wrote {args.output}" + (f" and {args.png}" if args.png else ""))
    return 0


def _cmd_compare(args) -> int:
    result = compare(args.a, args.b, allow=args.allow, layout=args.layout)
    print(compare_text(result))
    if args.json:
        write_atomic_text(Path(args.json), json.dumps(result, indent=2) + "\n")
    if args.report:
        path = compare_report(result, Path(args.report), layout=args.layout)
        print(f"wrote {path} and {path.parent / 'compare.md'}")
    return 0 if result["ok"] else 3


def _cmd_verify(args) -> int:
    result = verify(args.provenance, input=args.input, output=args.output, recipe=args.recipe,
                           layout=args.layout)
    print(result["message"])
    for line in result.get("checked", []):
        print(f"  checked {line}")
    return 0 if result["ok"] else 3


def _cmd_collate(args) -> int:
    col = api.collate(args.records, args.out, labels=args.label, threshold=args.threshold)
    print(f"collated {len(col['submissions'])} record(s): " + ", ".join(col["written"]))
    for line in problems_text(col):
        print(f"differs: {line}")
    return 0 if col["ok"] else 3


def _cmd_schema(args) -> int:
    node = LAYOUT if args.layout else RECIPE
    schema = {"$schema": "https://json-schema.org/draft/2020-12/schema",
              "title": "initgen layout" if args.layout else "initgen recipe", **node.json()}
    print(json.dumps(schema, indent=2))
    return 0


def _cmd_demo(args) -> int:
    print(demo.run_demo(Path(args.out)))
    return 0


# command -> the function that runs it (after the output checks), each returning the exit code
COMMANDS = {"check": _cmd_check, "apply": _cmd_apply, "preview": _cmd_preview, "mask": _cmd_mask,
            "compare": _cmd_compare, "verify": _cmd_verify, "collate": _cmd_collate, "schema": _cmd_schema,
            "demo": _cmd_demo}


def _dispatch(args) -> int:
    _guard_outputs(args)
    if args.command == "apply":
        args._ensemble = bool(api.load_recipe(args.recipe).data.get("members")) and args.member is None
    _check_outputs(args)
    return COMMANDS[args.command](args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
