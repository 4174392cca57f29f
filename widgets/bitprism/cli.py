"""The ``bitprism`` terminal command: the headless core from a shell or a CI job.

::

    bitprism show 2**-24 --formats fp32,bf16,fp16,e4m3      # one value across formats
    bitprism scan model.safetensors --formats fp16,e4m3 --fail-on nan,inf,overflow
    bitprism formats                                         # the built-in formats and aliases
    bitprism scale acts.npy --formats e4m3 --objective sqnr  # per tensor, channel, MX block scales

Exit status: 0 success; 1 when ``scan --fail-on`` found one of the named conditions (so a
pipeline can refuse a checkpoint); 2 for a bad argument, an unknown format or an unreadable
file, with one line on stderr and no traceback. ``--json`` prints one JSON object on stdout
(plain dicts; exact values as strings that ``bitprism.numerics.parse`` reads back exactly).
File and tensor names are printed with control and other non-printable characters escaped
(``\x1b``, ``\n``, ``\ud800``), so a name can neither drive the terminal nor forge a line.

Never imports ipywidgets, IPython or matplotlib.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
from fractions import Fraction
from typing import Any, Sequence

from ._version import __version__
from .errors import BitprismError, ParseError
from .formats import FORMATS, Format, format_aliases, format_key, get_format
from .tensors.file_checks import printable
from .tensors.npz_members import DEFAULT_MAX_RATIO

__all__ = ["main"]

EXIT_OK = 0
EXIT_FAILED_CHECK = 1
EXIT_USAGE = 2

FAIL_CONDITIONS = ("nan", "inf", "nonfinite", "overflow", "underflow", "subnormal")
_FAIL_HELP = (
    "exit 1 if any tensor meets one of these comma-separated conditions in any format. "
    "nan: a NaN in the input or in any cast result (an Inf or an overflow cast into a format "
    "without Inf such as float8_e4m3fn becomes NaN; so does a negative value cast into an "
    "unsigned format, a zero into float8_e8m0fnu, and every value of an MX block holding a "
    "NaN or Inf); inf: an Inf in the input or in any cast result; nonfinite: either; "
    "overflow, underflow, subnormal: as the table counts them (overflow: a finite value "
    "beyond the largest finite one once rounded; underflow: a nonzero value that becomes "
    "zero; subnormal: a value whose result is subnormal). With directed rounding an overflow "
    "becomes Inf on one side and the largest finite value on the other (IEEE 754 7.4); the "
    "result's NaN and Inf are counted exactly, by one more pass over the data when the "
    "counts alone cannot tell the sides apart"
)
_DEFAULT_SHOW_FORMATS = "float32,bfloat16,float16,float8_e4m3fn,float8_e5m2"
_DEFAULT_SCAN_FORMATS = "bfloat16,float16,float8_e4m3fn,float8_e5m2"
_SEED_LIMIT = 1 << 63  # seeds are kept as 63-bit integers (as scan() draws them)


class _UsageError(Exception):
    """A bad command line: reported in one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> Any:  # argparse would print usage and exit
        raise _UsageError(f"{self.prog}: {message}")


# ----- argument helpers -----------------------------------------------------------------------


def _split(text: str) -> list[str]:
    return [part.strip() for part in text.split(",") if part.strip()]


def _resolve_formats(text: str, allow_mx: bool) -> list[Any]:
    names = _split(text)
    if not names:
        raise _UsageError(f"--formats needs at least one format name; got {text!r}")
    out: list[Any] = []
    for name in names:
        try:
            out.append(get_format(name))
            continue
        except BitprismError as exc:
            error = exc
        from .tensors.mx import MX_FORMATS

        block = MX_FORMATS.get(format_key(name))
        if block is not None and allow_mx:
            out.append(block)  # the OCP MX block formats by name
            continue
        if block is not None:
            raise _UsageError(
                f"{name!r} is an MX block format (one shared scale per block of "
                f"{block.block_size} values): it applies to tensors, so use it with "
                f"`bitprism scan FILE --formats {name}`; show takes element formats such as "
                f"{block.element.name if block.element is not None else 'float8_e4m3fn'}"
            )
        raise _UsageError(str(error).replace("\n", " "))
    return out


def _fail_conditions(text: str | None) -> list[str]:
    if text is None:
        return []
    wanted = [c.lower() for c in _split(text)]
    bad = [c for c in wanted if c not in FAIL_CONDITIONS]
    if bad or not wanted:
        raise _UsageError(
            f"--fail-on takes a comma-separated list of {', '.join(FAIL_CONDITIONS)}; got {text!r}"
        )
    return wanted


def _options(args: argparse.Namespace) -> Any:
    """The cast options of the command line; stochastic rounding without --seed draws a seed
    here, once, so the output can name it and a second run with --seed repeats the first."""
    from .numerics.options import CastOptions

    options = CastOptions(args.rounding, args.overflow, args.subnormals)
    seed = args.seed
    if seed is not None and not 0 <= seed < _SEED_LIMIT:
        raise _UsageError(f"--seed must be an integer in 0..2**63-1; got {seed!r}")
    if seed is None and options.rounding == "stochastic":
        import numpy as np

        seed = int(np.random.SeedSequence().generate_state(1, np.uint64)[0] >> np.uint64(1))
    return CastOptions(options.rounding, options.overflow, options.subnormals, seed)


def _add_cast_options(p: argparse.ArgumentParser, scan: bool) -> None:
    from .numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES

    stochastic = (
        "; stochastic: away from zero with probability equal to the distance from the "
        "neighbour toward zero, in units of the gap between the two neighbours, else toward zero"
    )
    if scan:
        stochastic += " (it needs a full scan: not with --quantiles none)"
    p.add_argument(
        "--rounding",
        default="roundTiesToEven",
        help=f"rounding direction (default %(default)s): {', '.join(ROUNDING_MODES[:5])} "
        f"(or rne, rna, rtp, rtn, rtz){stochastic}",
    )
    p.add_argument(
        "--seed",
        type=int,
        metavar="N",
        help="seed of stochastic rounding, an integer in 0..2**63-1 (without it one is drawn "
        "and printed, so a run can be repeated)",
    )
    p.add_argument(
        "--overflow", default="standard", help=f"one of {', '.join(OVERFLOW_MODES)} (default "
        "%(default)s: as IEEE 754 7.4 for the rounding direction, NaN standing in for Inf in a "
        "format without Inf; saturate: the largest finite value)"
    )
    p.add_argument(
        "--subnormals", default="keep", help=f"one of {', '.join(SUBNORMAL_MODES)} (default "
        "%(default)s)"
    )


def _build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="bitprism",
        description="Bit-level inspection of floating-point values and tensors across formats.",
    )
    parser.add_argument("--version", action="version", version=f"bitprism {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    show = sub.add_parser(
        "show",
        help="one value across formats",
        description="Show one exactly-read value (0.1, 2**-24, 0x1p-3, 1/3, -inf) in several "
        "formats.",
    )
    show.add_argument("value", metavar="VALUE", help="a number or expression, read exactly")
    show.add_argument(
        "--formats",
        default=_DEFAULT_SHOW_FORMATS,
        help="comma-separated format names or aliases (see `bitprism formats`); default "
        "%(default)s",
    )
    _add_cast_options(show, scan=False)
    show.add_argument("--json", action="store_true", help="machine-readable output")

    scan = sub.add_parser(
        "scan",
        help="what a cast does to the tensors of a file",
        description="Survival table of each tensor of a .npy, .npz or .safetensors file: for "
        "each format, how many values overflow, underflow, land subnormal or survive exactly, "
        "and the error of the rest. Exit 1 when --fail-on finds one of its conditions.",
    )
    scan.add_argument(
        "file",
        metavar="FILE",
        help="a .npy, .npz or .safetensors file (a file with another suffix is recognised by "
        "its first bytes)",
    )
    scan.add_argument("--tensor", metavar="NAME", help="only this tensor of the file")
    scan.add_argument(
        "--formats",
        default=_DEFAULT_SCAN_FORMATS,
        help="comma-separated format names or aliases, MX block formats such as mxfp4 "
        "included (see `bitprism formats`); default %(default)s",
    )
    _add_cast_options(scan, scan=True)
    scan.add_argument("--fail-on", metavar="CONDITIONS", help=_FAIL_HELP)
    scan.add_argument(
        "--quantiles",
        choices=("exact", "histogram", "none"),
        default="exact",
        help="error quantiles: exact (default), histogram (one pass, within 0.4%%) or none "
        "(counts only, the fastest: enough for --fail-on)",
    )
    scan.add_argument(
        "--max-ratio",
        type=float,
        default=DEFAULT_MAX_RATIO,
        metavar="R",
        help="refuse a compressed .npz member that declares more than R times its compressed "
        "size (default %(default)g, above deflate's limit of about 1032, so numpy's own "
        "files pass); 0 lifts the cap",
    )
    scan.add_argument("--json", action="store_true", help="machine-readable output")
    scan.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")

    scale = sub.add_parser(
        "scale",
        help="which power-of-two scales a tensor needs in a format",
        description="For each tensor of a file and each format, side by side: no scaling, one "
        "scale per tensor, per channel and MX blocks, with SQNR, relative-error p99, overflow, "
        "underflow, and what the scales cost in bits per element.",
    )
    scale.add_argument("file", metavar="FILE", help="a .npy, .npz or .safetensors file")
    scale.add_argument("--tensor", metavar="NAME", help="only this tensor of the file")
    scale.add_argument("--formats", default="float8_e4m3fn,float8_e5m2",
                       help="comma-separated element formats (default %(default)s)")
    scale.add_argument("--granularity", default="tensor,channel,block", help="rows besides no "
                       "scaling: comma-separated tensor, channel, block (default %(default)s)")
    scale.add_argument("--objective", choices=("sqnr", "no_overflow", "amax"), default="sqnr",
                       help="how tensor and channel scales are chosen (default %(default)s)")
    scale.add_argument("--axis", type=int, default=-1, help="the channel and block axis (default -1)")
    scale.add_argument("--block-size", type=int, default=32, help="elements per MX scale (default 32)")
    scale.add_argument("--margin", type=int, default=0, help="binades of headroom (default 0)")
    _add_cast_options(scale, scan=False)
    scale.add_argument("--json", action="store_true", help="machine-readable output")

    fmts = sub.add_parser(
        "formats",
        help="list the built-in formats and their aliases",
        description="The built-in formats, the names that resolve to them, and the MX block "
        "formats.",
    )
    fmts.add_argument("--json", action="store_true", help="machine-readable output")
    return parser


def _protect_negative_value(argv: list[str]) -> list[str]:
    """Let ``show -2**-24`` through: argparse would read a leading '-' as an option."""
    if not argv or argv[0] != "show":
        return argv
    out = [argv[0]]
    for token in argv[1:]:
        lead = token[1:2]
        if token.startswith("-") and not token.startswith("--") and (
            lead.isdigit() or lead in ".(" or token[1:].lower().startswith(("inf", "nan"))
        ):
            token = " " + token  # parse() ignores the space; argparse sees a positional
        out.append(token)
    return out


# ----- show -----------------------------------------------------------------------------------


def _exact_string(x: Any) -> str:
    from .numerics.decimal_text import exact_text
    from .numerics.exact import ExactValue

    if isinstance(x, (Fraction, int)):
        x = ExactValue.finite(Fraction(x))
    return exact_text(x)


def _fraction_text(q: Fraction | None) -> str | None:
    return None if q is None else _exact_string(q)


def _row_record(row: Any) -> dict[str, Any]:
    """One compare() row as plain JSON types; every number is an exact string."""
    from .numerics.inspect import CodeClass

    fmt = row.format
    parts = row.fields
    groups = [str(parts.sign)] if fmt.signed else []
    groups.append(format(parts.exponent, f"0{fmt.exponent_bits}b"))
    if fmt.significand_bits:
        groups.append(format(parts.significand, f"0{fmt.significand_bits}b"))
    return {
        "format": fmt.name,
        "code": f"0x{row.code:0{-(-fmt.bits // 4)}x}",
        "bits": " ".join(groups),
        "class": CodeClass(int(parts.kind)).label,
        "value": _exact_string(row.stored),
        "shortest": row.shortest,
        "exact": not row.inexact and not row.not_representable and not row.overflowed,
        "error": _fraction_text(row.abs_error),
        "relative_error": _fraction_text(row.rel_error),
        "ulp_error": _fraction_text(row.ulp_error),
        "overflow": bool(row.overflowed),
        "underflow": bool(row.underflowed),
        "subnormal": bool(row.subnormal),
        "not_representable": bool(row.not_representable),
    }


def _show_text_fallback(comparison: Any, records: list[dict[str, Any]]) -> str:
    """A plain table, used only while the text renderer of compare() is not installed."""
    head = ["format", "code", "bits", "value", "error"]
    rows = [
        [
            r["format"],
            r["code"],
            r["bits"],
            r["value"] if len(r["value"]) <= 20 else r["shortest"],
            "exact" if r["exact"] else (r["error"] or "-"),
        ]
        for r in records
    ]
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
    lines = [f"{comparison.text} = {_exact_string(comparison.input)}"]
    lines.append("  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip())
    lines += ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
    return "\n".join(lines)


def _cmd_show(args: argparse.Namespace) -> int:
    from .numerics.compare import compare

    options = _options(args)
    formats = _resolve_formats(args.formats, allow_mx=False)
    text = args.value.strip()
    try:
        comparison = compare(text, formats, options=options)
    except ParseError as exc:
        where = f"{exc.reason} (column {exc.column})"
        raise _UsageError(f"cannot read VALUE {text!r}: {where}") from exc
    records = [_row_record(row) for row in comparison.rows]
    if args.json:
        payload = {
            "input": text,
            "exact": _exact_string(comparison.input),
            "rounding": options.rounding,
            "overflow": options.overflow,
            "subnormals": options.subnormals,
            "formats": records,
            "seed": options.seed,
        }
        print(json.dumps(payload, ensure_ascii=False))
        return EXIT_OK
    try:
        # lines are cut at the width given; keep whole rows (float64 bits need ~140 columns)
        table = comparison.to_text(width=max(160, shutil.get_terminal_size().columns))
    except ImportError:  # the text renderer is a separate module of the render layer
        table = _show_text_fallback(comparison, records)
    print(table)
    return EXIT_OK


# ----- scan -----------------------------------------------------------------------------------


def _conditions_met(summary: dict[str, dict[str, Any]], wanted: list[str]) -> list[str]:
    """The ``wanted`` conditions found in one tensor's per-format counts (``_counts``)."""
    return [c for c in wanted if any(int(counts.get(c) or 0) > 0 for counts in summary.values())]


def _scan_one(tensors: Any, name: str, formats: list[Any], options: Any, args: Any) -> Any:
    """The scan of one tensor; an error names the file and the tensor."""
    from .tensors.scan import scan

    try:
        arr = tensors[name]
        result = scan(
            arr,
            formats=formats,
            options=options,
            progress=not args.no_progress,
            quantiles=False if args.quantiles == "none" else args.quantiles,
        )
    except BitprismError as exc:
        where = f"{printable(os.fspath(args.file))}: tensor {name!r}: "
        message = str(exc)
        if message.startswith(printable(os.fspath(args.file))):
            raise
        raise BitprismError(where + message) from exc
    return arr, result


def _cmd_scan(args: argparse.Namespace) -> int:
    from .tensors.files import open_tensors

    options = _options(args)
    formats = _resolve_formats(args.formats, allow_mx=True)
    wanted = _fail_conditions(args.fail_on)
    path = args.file
    tensors = open_tensors(path, max_ratio=args.max_ratio or None)
    names = list(tensors)
    if args.tensor is not None:
        if args.tensor not in tensors:
            raise BitprismError(
                f"{printable(os.fspath(path))}: no tensor named {args.tensor!r}; it holds: "
                f"{', '.join(repr(n) for n in names[:20]) or 'nothing'}"
            )
        names = [args.tensor]
    reports = []
    failed: set[str] = set()
    specials = args.json or any(c in wanted for c in ("nan", "inf", "nonfinite"))
    for name in names:
        arr, result = _scan_one(tensors, name, formats, options, args)
        counts = _counts(result, arr if specials else None)
        met = _conditions_met(counts, wanted)
        failed.update(met)
        # the full summary (exact decimal strings) only for --json: text needs the counts alone
        summary = _scan_summary(result, counts) if args.json else {}
        reports.append((name, tuple(arr.shape), str(arr.dtype), result, summary, counts, met))
        tensors.release(name)  # a decompressed member's temporary file goes with its array
        del arr
    if args.json:
        payload = {
            "file": os.fspath(path),
            "rounding": options.rounding,
            "overflow": options.overflow,
            "subnormals": options.subnormals,
            "fail_on": wanted,
            "failed": sorted(failed),
            "tensors": [
                {"name": name, "shape": list(shape), "dtype": dtype, "formats": summary,
                 "failed": met}
                for name, shape, dtype, _, summary, _, met in reports
            ],
            "seed": options.seed,
        }
        # ASCII escapes keep the output valid whatever a name holds (a lone surrogate too)
        print(json.dumps(payload, ensure_ascii=True))
        return EXIT_FAILED_CHECK if failed else EXIT_OK
    for name, shape, dtype, result, _, counts, met in reports:
        shown = "x".join(str(d) for d in shape) or "scalar"
        print(f"== {printable(name)} ({shown}, {dtype}) ==")
        print(str(result))
        made = [
            f"{fmt} {n} {kind}"
            for fmt, row in counts.items()
            for kind, n in (("NaN", row["result_nan"]), ("Inf", row["result_inf"]))
            if specials and n
        ]
        if made:
            print(f"cast results holding NaN or Inf: {', '.join(made)}")
        if met:
            print(f"fails: {', '.join(met)}")
        print()
    if options.rounding == "stochastic":
        print(f"stochastic rounding with seed {options.seed} (--seed {options.seed} repeats it)")
    if wanted:
        verdict = f"FAIL ({', '.join(sorted(failed))})" if failed else "pass"
        print(f"{printable(os.fspath(path))}: --fail-on {','.join(wanted)}: {verdict}")
    return EXIT_FAILED_CHECK if failed else EXIT_OK


def _plain(value: Any) -> Any:
    """JSON-friendly copy: ints stay ints, other numbers become exact strings."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    try:
        import numpy as np

        if isinstance(value, np.generic):
            value = value.item()
    except ImportError:  # pragma: no cover - numpy is a dependency
        pass
    if isinstance(value, int):
        return value
    if isinstance(value, (float, Fraction)):
        import math

        if isinstance(value, float) and not math.isfinite(value):
            return str(value)
        return _exact_string(Fraction(value))
    return str(value)


def _counts(result: Any, data: Any) -> dict[str, dict[str, Any]]:
    """Per format of a ``ScanResult``: the ``--fail-on`` counts, and the NaN and Inf of the cast
    result (``result_nan``, ``result_inf``, None when not asked: ``data`` None)."""
    from .tensors.cast_specials import cast_specials

    out: dict[str, dict[str, Any]] = {}
    for row in result.formats:
        made = cast_specials(result, row, data) if data is not None else None
        nan = None if made is None else made.nan
        inf = None if made is None else made.inf
        out[row.name] = {
            "nan": max(row.nan, nan or 0),
            "inf": max(row.inf, inf or 0),
            "nonfinite": max(row.nan + row.inf, (nan or 0) + (inf or 0)),
            "overflow": row.overflow,
            "underflow": row.underflow,
            "subnormal": row.subnormal or 0,
            "result_nan": nan,
            "result_inf": inf,
        }
    return out


def _scan_summary(result: Any, counts: dict[str, dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """Per-format figures of a ``ScanResult`` as plain dicts (counts as ints, the rest as exact
    strings): every field of ``FormatScan`` (nan and inf count the input), then the NaN and Inf
    of the cast result (``result_nan``, ``result_inf``)."""
    import dataclasses

    out: dict[str, dict[str, Any]] = {}
    for row in result.formats:
        fields = {f.name: getattr(row, f.name) for f in dataclasses.fields(row) if f.name != "format"}
        fields["result_nan"] = counts[row.name]["result_nan"]
        fields["result_inf"] = counts[row.name]["result_inf"]
        out[row.name] = _plain(fields)
    return out


# ----- scale ----------------------------------------------------------------------------------


def _cmd_scale(args: argparse.Namespace) -> int:
    from .tensors.scaling import GRANULARITIES
    from .tensors.scaling.compare import compare_file

    options = _options(args)
    rows = [g.lower() for g in _split(args.granularity)]
    if not rows or not set(rows) <= set(GRANULARITIES):
        raise _UsageError(f"--granularity takes a comma-separated list of {', '.join(GRANULARITIES)}; "
                          f"got {args.granularity!r}")
    out = compare_file(args.file, _resolve_formats(args.formats, allow_mx=True), args.tensor,
                       objective=args.objective, axis=args.axis, block_size=args.block_size,
                       margin=args.margin, rounding=options.rounding, overflow=options.overflow,
                       subnormals=options.subnormals, granularities=rows)
    if args.json:
        tensors = [{"name": n, "shape": list(sh), "dtype": dt,
                    "formats": {c.format.name: _plain(c.records()) for c in done}}
                   for n, sh, dt, done in out]
        print(json.dumps({"file": os.fspath(args.file), "objective": args.objective,
                          "rounding": options.rounding, "overflow": options.overflow,
                          "subnormals": options.subnormals, "tensors": tensors}, ensure_ascii=True))
        return EXIT_OK
    for name, shape, dtype, done in out:
        print(f"== {printable(name)} ({'x'.join(map(str, shape)) or 'scalar'}, {dtype}) ==")
        print("\n\n".join(str(c) for c in done) + "\n")
    return EXIT_OK


# ----- formats --------------------------------------------------------------------------------


def _format_record(f: Format) -> dict[str, Any]:
    from .numerics.decimal_text import exact_decimal

    return {
        "name": f.name,
        "layout": f.layout,
        "bits": f.bits,
        "exponent_bits": f.exponent_bits,
        "significand_bits": f.significand_bits,
        "bias": f.bias,
        "specials": f.specials,
        "signed": f.signed,
        "max": exact_decimal(f.max_finite),
        "min_normal": exact_decimal(f.smallest_normal),
        "min_subnormal": exact_decimal(f.smallest_subnormal) if f.has_subnormals else None,
        "emax": f.emax,
        "emin": f.emin,
    }


def _cmd_formats(args: argparse.Namespace) -> int:
    from .tensors.mx import MX_FORMATS

    records = [_format_record(f) for f in FORMATS.values()]
    blocks = [
        {
            "name": m.name,
            "element": m.element.name if m.element is not None else "int8",
            "block_size": m.block_size,
            "scale": "float8_e8m0fnu",
            "emax_elem": m.emax_elem,
            "max_element": _exact_string(Fraction(m.max_normal)),
        }
        for m in MX_FORMATS.values()
    ]
    aliases = [{"name": a.name, "format": a.format, "note": a.note} for a in format_aliases()]
    if args.json:
        print(json.dumps({"formats": records, "block_formats": blocks, "aliases": aliases}))
        return EXIT_OK
    head = ["name", "layout", "bias", "specials", "max", "min normal", "min subnormal"]
    rows = []
    for r in records:
        big = len(r["max"]) > 14
        rows.append(
            [
                r["name"],
                r["layout"],
                str(r["bias"]),
                r["specials"] + ("" if r["signed"] else ", unsigned"),
                f"{float(Fraction(r['max'])):.6g}" if big else r["max"],
                f"2^{r['emin']}",
                f"2^{r['emin'] - r['significand_bits']}" if r["min_subnormal"] else "-",
            ]
        )
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
    print("layout = sign-exponent-significand bits")
    print("  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip())
    for row in rows:
        print("  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip())
    print()
    print("MX block formats (OCP Microscaling v1.0): one float8_e8m0fnu scale per block")
    for b in blocks:
        line = f"  {b['name']:<11} {b['block_size']} x {b['element']:<14}"
        print(f"{line} max element {b['max_element']}")
    print()
    _print_aliases(aliases)
    return EXIT_OK


def _print_aliases(aliases: list[dict[str, Any]]) -> None:
    """The aliases by format, then what the names that could mean another format mean."""
    print("Aliases (case, spaces at the ends, and '-' against '_' do not matter)")
    width = max(len(name) for name in FORMATS)
    for name in FORMATS:
        mine = [a["name"] + ("*" if a["note"] else "") for a in aliases if a["format"] == name]
        if mine:
            print(f"  {name:<{width}}  {', '.join(mine)}")
    print("* could mean another format:")
    for a in aliases:
        if a["note"]:
            print(f"  {a['name']} -> {a['format']}: {a['note']}")


# ----- entry point ----------------------------------------------------------------------------


def _one_line(message: str) -> str:
    """One line, with whatever a file name or a value brought in escaped (``printable``)."""
    return printable(" ".join(message.split()))


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line ``argv`` (default ``sys.argv[1:]``); return the exit status."""
    args_list = list(sys.argv[1:] if argv is None else argv)
    parser = _build_parser()
    try:
        args = parser.parse_args(_protect_negative_value(args_list))
    except _UsageError as exc:
        print(f"error: {_one_line(str(exc))} (see bitprism --help)", file=sys.stderr)
        return EXIT_USAGE
    except SystemExit as exc:  # --help / --version
        return int(exc.code or 0) if not isinstance(exc.code, str) else EXIT_USAGE
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    command = {"show": _cmd_show, "scan": _cmd_scan, "formats": _cmd_formats,
               "scale": _cmd_scale}[args.command]
    try:
        return command(args)
    except _UsageError as exc:
        print(f"bitprism {args.command}: error: {_one_line(str(exc))}", file=sys.stderr)
        return EXIT_USAGE
    except ParseError as exc:
        where = f"{exc.reason} (column {exc.column})"
        print(f"bitprism {args.command}: error: {where}", file=sys.stderr)
        return EXIT_USAGE
    except BrokenPipeError:  # pragma: no cover - e.g. piped into head
        return EXIT_OK
    except (BitprismError, OSError) as exc:
        print(f"bitprism {args.command}: error: {_one_line(str(exc))}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("bitprism: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
