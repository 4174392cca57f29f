"""Where the bench scripts put their figures: one section per script in docs/benchmarks.md.

A bench script collects what it prints in a ``Lines`` list (``out.print(...)`` prints and
keeps each line) and, when run with ``--write``, passes it to ``write_section``, which
(re)writes that script's section of the file (a ``## <title>`` heading, the date in UTC, the
machine and the command, then the lines) and keeps every other section as it is.

Not a test module (pytest collects ``test_*.py`` only) and not part of the package.
"""

from __future__ import annotations

import datetime
import os
import platform
import sys
from importlib import metadata
from pathlib import Path

__all__ = ["DEFAULT_PATH", "HEADER", "Lines", "machine", "write_section"]

DEFAULT_PATH = Path(__file__).resolve().parents[1] / "docs" / "benchmarks.md"

HEADER = """# Benchmarks

Figures written by the bench scripts under `tests/` (`python tests/bench_<name>.py --write`),
one section per script, each with the date (UTC), the machine it ran on and the command. The
encode and scan figures are ratios against baselines measured in the same run on that machine
(the libraries' own casts, a hand-written ml_dtypes + numpy loop, one streaming `x.max()`);
the widget figures are Python-side times and bytes per update, printed beside their targets.
They describe one machine on one day and move with the machine more than with the code: to
compare two versions of the code, run both on the same machine in one session. None of them
is an assertion: the unit tests never check wall-clock time (the machines are shared and
noisy).
"""

# Sections a script writes go above this one, so the oldest figures stay at the bottom.
EARLIER = "Earlier measurements"


class Lines(list[str]):
    """What a bench script prints, kept line by line for ``write_section``."""

    def print(self, *parts: object, sep: str = " ") -> None:
        """``print(*parts, sep=sep)``, and keep the printed text as lines."""
        text = sep.join(str(p) for p in parts)
        print(text)
        self.extend(text.split("\n"))


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            for line in f:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine() or "unknown CPU"


def _ram() -> str:
    try:
        with open("/proc/meminfo", encoding="utf-8") as f:
            for line in f:
                if line.startswith("MemTotal:"):
                    kib = int(line.split()[1])
                    return f"{kib / 2**20:.1f} GiB RAM"
    except (OSError, ValueError, IndexError):
        pass
    return "RAM unknown"


def _version(package: str) -> str | None:
    try:
        return metadata.version(package)
    except metadata.PackageNotFoundError:
        return None


def machine() -> str:
    """CPU model, logical cores, RAM, and the versions of Python and the libraries that set
    the pace (a library that is not installed is left out)."""
    parts = [_cpu_model(), f"{os.cpu_count() or 1} logical cores", _ram(),
             f"Python {platform.python_version()}"]
    for package in ("numpy", "ml_dtypes", "numba"):
        version = _version(package)
        if version is not None:
            parts.append(f"{package} {version}")
    return ", ".join(parts)


def _command() -> str:
    """The command that measured, with the script named as in the repository and without
    ``--write`` and its path (never a path of this machine)."""
    args: list[str] = []
    rest = iter(sys.argv[1:])
    for arg in rest:
        if arg == "--write":
            following = next(rest, None)
            if following is not None and following.startswith("-"):
                args.append(following)  # --write took no path: keep the next option
        elif not arg.startswith("--write="):
            args.append(arg)
    return " ".join(["python", f"tests/{Path(sys.argv[0]).name}", *args])


def _split(text: str) -> tuple[str, list[tuple[str, str]]]:
    """(text before the first section, [(title, whole section text)]); a "## " line inside a
    fenced block does not start a section."""
    head: list[str] = []
    sections: list[tuple[str, list[str]]] = []
    fenced = False
    for line in text.splitlines(keepends=True):
        if line.startswith("```"):
            fenced = not fenced
        if not fenced and line.startswith("## "):
            sections.append((line[3:].strip(), [line]))
        elif sections:
            sections[-1][1].append(line)
        else:
            head.append(line)
    return "".join(head), [(title, "".join(body)) for title, body in sections]


def _section(title: str, lines: list[str]) -> str:
    today = datetime.datetime.now(datetime.timezone.utc).date().isoformat()
    body = "\n".join(line.rstrip() for line in lines).strip("\n")
    return (
        f"## {title}\n\n"
        f"- date: {today} (UTC)\n"
        f"- machine: {machine()}\n"
        f"- command: `{_command()}`\n\n"
        f"```text\n{body}\n```\n\n"
    )


def write_section(title: str, lines: list[str], path: str | os.PathLike[str] = DEFAULT_PATH) -> Path:
    """(Re)write the section ``## <title>`` of the benchmarks file at ``path``: the date (UTC),
    the machine, the command and ``lines``. Other sections stay as they are; a new section goes
    above the earlier measurements. The file's opening paragraph is always ``HEADER``."""
    p = Path(path)
    text = p.read_text(encoding="utf-8") if p.exists() else ""
    _, sections = _split(text)
    new = _section(title, lines)
    titles = [t for t, _ in sections]
    if title in titles:
        sections[titles.index(title)] = (title, new)
    else:
        at = next((k for k, t in enumerate(titles) if t.startswith(EARLIER)), len(sections))
        sections.insert(at, (title, new))
    out = HEADER + "\n" + "".join(body.rstrip("\n") + "\n\n" for _, body in sections)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(out.rstrip("\n") + "\n", encoding="utf-8")
    return p
