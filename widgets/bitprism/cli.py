"""The ``bitprism`` terminal command: the headless core from a shell or a CI job.

::

    bitprism show 2**-24 --formats fp32,bf16,fp16,e4m3      # one value across formats
    bitprism scan model.safetensors --formats fp16,e4m3 --fail-on nan,inf,overflow
    bitprism formats                                         # the built-in formats

Exit status: 0 success; 1 when ``scan --fail-on`` found one of the named conditions (so a
pipeline can refuse a checkpoint); 2 for a bad argument, an unknown format or an unreadable
file, with one line on stderr and no traceback. ``--json`` prints one JSON object on stdout
(plain dicts; exact values as strings that ``bitprism.numerics.parse`` reads back exactly).

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
from .formats import FORMATS, Format, get_format

__all__ = ["main"]

EXIT_OK = 0
EXIT_FAILED_CHECK = 1
EXIT_USAGE = 2

FAIL_CONDITIONS = ("nan", "inf", "overflow", "underflow")
_DEFAULT_SHOW_FORMATS = "float32,bfloat16,float16,float8_e4m3fn,float8_e5m2"
_DEFAULT_SCAN_FORMATS = "bfloat16,float16,float8_e4m3fn,float8_e5m2"


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
        if allow_mx:
            from .tensors.scan import scan_format

            try:
                out.append(scan_format(name))  # the OCP MX block formats by name
                continue
            except BitprismError:
                pass
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
    from .numerics.options import CastOptions

    return CastOptions(args.rounding, args.overflow, args.subnormals)


def _add_cast_options(p: argparse.ArgumentParser) -> None:
    from .numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES

    p.add_argument(
        "--rounding",
        default="roundTiesToEven",
        help=f"rounding direction: {', '.join(ROUNDING_MODES[:5])} (or rne, rtz, ...)",
    )
    p.add_argument("--overflow", default="standard", help=f"one of {', '.join(OVERFLOW_MODES)}")
    p.add_argument("--subnormals", default="keep", help=f"one of {', '.join(SUBNORMAL_MODES)}")


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
    show.add_argument("--formats", default=_DEFAULT_SHOW_FORMATS, help="comma-separated names")
    _add_cast_options(show)
    show.add_argument("--json", action="store_true", help="machine-readable output")

    scan = sub.add_parser(
        "scan",
        help="what a cast does to the tensors of a file",
        description="Survival table of each tensor of a .npy, .npz or .safetensors file.",
    )
    scan.add_argument("file", metavar="FILE")
    scan.add_argument("--tensor", metavar="NAME", help="only this tensor of the file")
    scan.add_argument(
        "--formats",
        default=_DEFAULT_SCAN_FORMATS,
        help="comma-separated names (MX block formats such as mxfp4 allowed)",
    )
    _add_cast_options(scan)
    scan.add_argument(
        "--fail-on",
        metavar="CONDITIONS",
        help="exit 1 if any of nan,inf,overflow,underflow occurs in any tensor and format",
    )
    scan.add_argument(
        "--quantiles",
        choices=("exact", "histogram", "none"),
        default="exact",
        help="error quantiles: exact (default), histogram (one pass, within 0.4%%) or none "
        "(counts only, the fastest: enough for --fail-on)",
    )
    scan.add_argument("--json", action="store_true", help="machine-readable output")
    scan.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")

    fmts = sub.add_parser("formats", help="list the built-in formats")
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


def _format_name(fmt: Any) -> str:
    return str(getattr(fmt, "name", fmt))


def _conditions_met(summary: dict[str, dict[str, Any]], wanted: list[str]) -> list[str]:
    """The ``wanted`` conditions found in one tensor's per-format counts."""
    met = []
    for condition in wanted:
        for counts in summary.values():
            if int(counts.get(condition, 0) or 0) > 0:
                met.append(condition)
                break
    return met


def _cmd_scan(args: argparse.Namespace) -> int:
    from .tensors.files import open_tensors

    options = _options(args)
    formats = _resolve_formats(args.formats, allow_mx=True)
    wanted = _fail_conditions(args.fail_on)
    path = args.file
    tensors = open_tensors(path)
    names = list(tensors)
    if args.tensor is not None:
        if args.tensor not in tensors:
            raise BitprismError(
                f"{os.fspath(path)}: no tensor named {args.tensor!r}; it holds: "
                f"{', '.join(repr(n) for n in names[:20]) or 'nothing'}"
            )
        names = [args.tensor]
    from .tensors.scan import scan

    reports = []
    failed: set[str] = set()
    for name in names:
        arr = tensors[name]
        result = scan(
            arr,
            formats=formats,
            options=options,
            progress=not args.no_progress,
            quantiles=False if args.quantiles == "none" else args.quantiles,
        )
        # the full summary (exact decimal strings) only for --json: text needs the counts alone
        summary = _scan_summary(result, formats) if args.json else _counts(result, wanted)
        met = _conditions_met(summary, wanted)
        failed.update(met)
        reports.append((name, arr, result, summary, met))
    if args.json:
        payload = {
            "file": os.fspath(path),
            "rounding": options.rounding,
            "overflow": options.overflow,
            "subnormals": options.subnormals,
            "fail_on": wanted,
            "failed": sorted(failed),
            "tensors": [
                {
                    "name": name,
                    "shape": [int(d) for d in arr.shape],
                    "dtype": str(arr.dtype),
                    "formats": summary,
                    "failed": met,
                }
                for name, arr, _, summary, met in reports
            ],
        }
        print(json.dumps(payload, ensure_ascii=False))
    else:
        for name, arr, result, _, met in reports:
            shape = "x".join(str(d) for d in arr.shape) or "scalar"
            print(f"== {name} ({shape}, {arr.dtype}) ==")
            print(str(result))
            if met:
                print(f"fails: {', '.join(met)}")
            print()
        if wanted:
            verdict = f"FAIL ({', '.join(sorted(failed))})" if failed else "pass"
            print(f"{os.fspath(path)}: --fail-on {','.join(wanted)}: {verdict}")
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


def _counts(result: Any, names: list[str]) -> dict[str, dict[str, Any]]:
    """The counts ``names`` (``--fail-on`` conditions) of each format of a ``ScanResult``."""
    return {row.name: {n: getattr(row, n) for n in names} for row in result.formats}


def _scan_summary(result: Any, formats: list[Any]) -> dict[str, dict[str, Any]]:
    """Per-format figures of a ``ScanResult`` as plain dicts (counts as ints, the rest as exact
    strings); the keys include the ``--fail-on`` names: nan and inf (in the input), overflow and
    underflow (what the cast does)."""
    import dataclasses

    out: dict[str, dict[str, Any]] = {}
    for row in result.formats:
        fields = {f.name: getattr(row, f.name) for f in dataclasses.fields(row) if f.name != "format"}
        out[row.name] = _plain(fields)
    return out


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
    if args.json:
        print(json.dumps({"formats": records, "block_formats": blocks}))
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
    return EXIT_OK


# ----- entry point ----------------------------------------------------------------------------


def _one_line(message: str) -> str:
    return " ".join(message.split())


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
    command = {"show": _cmd_show, "scan": _cmd_scan, "formats": _cmd_formats}[args.command]
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
