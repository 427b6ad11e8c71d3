"""Limits that keep hostile or mistaken inputs from hanging, exhausting or crashing a run.

* Spec and material TOML text is refused above :data:`MAX_SPEC_BYTES` or nested deeper than
  :data:`MAX_NESTING`, *before* ``tomllib`` parses it (a 200 kB dotted key 100,000 levels deep
  takes ``tomllib`` tens of GB; arrays nested 1,000 deep exhaust its recursion).
* Data files (spectra, material tables) must be regular files (not a FIFO, a device such as
  ``/dev/zero`` or a folder) no larger than a stated cap, and are read with that cap.
* A Monte Carlo run is refused before any work when its estimated memory exceeds what the
  machine has available.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from .errors import RetolError

#: Largest spec (or material TOML) file read. [bytes]  Real specs are a few kB.
MAX_SPEC_BYTES = 1_000_000
#: Deepest nesting of tables, arrays and dotted keys in a spec.  Real specs reach 4.
MAX_NESTING = 32
#: Largest spectrum or material table read. [bytes]  A 100,000-row spectrum is about 3 MB.
MAX_DATA_BYTES = 50_000_000


def nesting_depth(text: str) -> int:
    """Deepest nesting of a TOML text, counted without parsing it.

    Each open ``[`` or ``{`` in a value, each table-header bracket and each dot of a dotted
    key adds a level; strings and comments are skipped.  An upper bound of the depth of the
    tables and arrays ``tomllib`` would build (a malformed text gives some number; the parser
    then reports the syntax).

    Parameters
    ----------
    text : str
        TOML text.

    Returns
    -------
    int
        Deepest level reached.

    Examples
    --------
    >>> nesting_depth('a = 1')
    0
    >>> nesting_depth('[a.b]\\nc = [[1], {d.e = 2}]')
    3
    """
    deepest = 0
    stack: list[str] = []  # open "[" (array) or "{" (inline table) in values
    key = True  # at a key (line start, or after "{" / "," in an inline table)
    header = 0  # inside a [table] header: its bracket count
    dots = 0
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch in "\"'":
            quote = text[i : i + 3] if text[i : i + 3] in ('"""', "'''") else ch
            j = i + len(quote)
            while j < n and text.startswith(quote, j) is False:
                j += 2 if (ch == '"' and text[j] == "\\") else 1
            i = j + len(quote)
            continue
        if ch == "#":
            j = text.find("\n", i)
            i = n if j < 0 else j
            continue
        if ch == "\n" and not stack:
            key, header, dots = True, 0, 0
        elif header:
            if ch == ".":
                dots += 1
            elif ch == "]":
                header -= 1
        elif key and not stack and ch == "[":
            header = 2 if text.startswith("[[", i) else 1
            i += header
            deepest = max(deepest, 1)
            continue
        elif key and ch == ".":
            dots += 1
        elif ch == "=":
            key = False
            dots = 0
        elif ch in "[{":
            stack.append(ch)
            key = ch == "{"
        elif ch in "]}":
            if stack:
                stack.pop()
        elif ch == "," and stack and stack[-1] == "{":
            key, dots = True, 0
        deepest = max(deepest, len(stack) + dots + (1 if header else 0))
        i += 1
    return deepest


def check_spec_text(text: str, name: str) -> None:
    """Refuse a spec (or material) TOML text that is too large or too deeply nested to parse.

    Call before ``tomllib.loads(text)``.

    Parameters
    ----------
    text : str
        The file's text.
    name : str
        The file's name, for the message.

    Raises
    ------
    RetolError
        Naming ``name``: over :data:`MAX_SPEC_BYTES` or nested deeper than :data:`MAX_NESTING`.
    """
    if len(text) > MAX_SPEC_BYTES or len(text.encode("utf-8", "surrogatepass")) > MAX_SPEC_BYTES:
        raise RetolError(
            name,
            f"is larger than {MAX_SPEC_BYTES // 1000} kB",
            "a spec is a few kB; put measured data in a CSV file and name it in the spec",
        )
    depth = nesting_depth(text)
    if depth > MAX_NESTING:
        raise RetolError(
            name,
            f"nests tables, arrays or dotted keys {depth} levels deep (more than {MAX_NESTING})",
            "a spec needs a few levels; check for a runaway dotted key or bracket",
        )


def read_data_file(path, field: str, limit: int = MAX_DATA_BYTES, what: str = "file") -> bytes:
    """Read a regular file of at most ``limit`` bytes (never a FIFO, device or folder).

    Parameters
    ----------
    path : str or Path
        The file.
    field : str
        The spec key or option that named it, for messages.
    limit : int
        Largest size accepted. [bytes]
    what : str
        What the file should be, for messages ("spectrum CSV file").

    Raises
    ------
    RetolError
        Naming ``field``: missing, not a regular file, larger than ``limit`` or unreadable.
    """
    p = Path(path)
    try:
        # O_NONBLOCK: opening a FIFO with no writer must not hang before we can look at it
        fd = os.open(p, os.O_RDONLY | os.O_NONBLOCK)
    except FileNotFoundError:
        raise RetolError(field, f"no such file {str(p)!r}", "check the path") from None
    except OSError as exc:
        raise RetolError(field, f"cannot open {str(p)!r} ({exc.strerror})", "check it") from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            kind = "a folder" if stat.S_ISDIR(st.st_mode) else "not a regular file"
            raise RetolError(
                field, f"{str(p)!r} is {kind} (a pipe or device is not read)", f"give a {what}"
            )
        if st.st_size > limit:
            raise RetolError(
                field,
                f"{p.name} is {st.st_size / 1e6:.1f} MB, more than the {limit / 1e6:g} MB read",
                f"give a smaller {what} (thin out the rows)",
            )
        os.set_blocking(fd, True)
        with os.fdopen(fd, "rb", closefd=True) as f:
            fd = -1
            data = f.read(limit + 1)
    except OSError as exc:
        raise RetolError(field, f"cannot read {str(p)!r} ({exc.strerror})", "check it") from None
    finally:
        if fd >= 0:
            os.close(fd)
    if len(data) > limit:  # grew while we read it
        raise RetolError(field, f"{p.name} is larger than {limit / 1e6:g} MB", f"give a {what}")
    return data


def read_csv_rows(path, field: str, what: str, columns: int, fix: str, names: str = ""):
    """The numeric rows of a small data table: ``[(line number, [values])]``.

    The file passes :func:`read_data_file`; it is UTF-8 (a byte-order mark is allowed), cells
    are separated by commas, semicolons, tabs or spaces, blank lines and ``#`` comments are
    skipped and a first row that is not numbers is a header.  Every other row must hold
    ``columns`` numbers (``names`` lists them in the error); ``fix`` is the advice given for a
    row that does not.  Checking the values (finite, positive, ...) is the caller's.
    """
    import re

    name = Path(path).name
    data = read_data_file(path, field, what=what)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RetolError(field, f"cannot read {name} ({exc})", "give a UTF-8 CSV file") from None
    rows = []
    first = True
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        cells = [c for c in re.split(r"\s*[,;\t]\s*|\s+", line) if c != ""]
        try:
            values = [float(c) for c in cells]
        except ValueError:
            if first:  # a header row
                first = False
                continue
            raise RetolError(
                field, f"{name} line {lineno}: cannot read {line!r} as {columns} numbers", fix
            ) from None
        first = False
        if len(values) != columns:
            shown = f" ({names})" if names else ""
            raise RetolError(
                field,
                f"{name} line {lineno}: expected {columns} columns{shown}, found {len(values)}",
                fix,
            )
        rows.append((lineno, values))
    return rows


def available_memory() -> int | None:
    """Memory this process may still use: MemAvailable, capped by a cgroup limit. [bytes]

    None when the machine does not say.
    """
    best = None
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    best = int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    if best is None:
        try:
            best = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (OSError, ValueError, AttributeError):
            best = None
    for limit_file, usage_file in (
        ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),
        (
            "/sys/fs/cgroup/memory/memory.limit_in_bytes",
            "/sys/fs/cgroup/memory/memory.usage_in_bytes",
        ),
    ):
        try:
            limit = Path(limit_file).read_text().strip()
            usage = int(Path(usage_file).read_text().strip())
        except (OSError, ValueError):
            continue
        if limit.isdigit() and int(limit) < 1 << 60:
            room = max(0, int(limit) - usage)
            best = room if best is None else min(best, room)
    return best


def run_memory_bytes(candidates: int, wavelengths: int, samples: int, keep: bool, chunk: int):
    """Estimated peak memory of a Monte Carlo run. [bytes]

    Per candidate and sample the engine keeps a few scalars and two Stokes vectors, the grid
    holds them again (14 float64) and the NetCDF image written to disk a third time; with
    ``keep_samples`` the 4 variables at every wavelength (float32) come three times too.
    Per chunk the draws and kernel outputs are temporary; 200 MB covers Python, numba and the
    histograms.
    """
    per_sample = 3 * 14 * 8 + (3 * 4 * 4 * wavelengths if keep else 0)
    per_chunk = min(chunk, samples) * (64 * 8 + 4 * 8 * wavelengths)
    return candidates * samples * per_sample + 2 * per_chunk + 200_000_000


def check_memory(need: int, field: str, fix: str) -> None:
    """Refuse work whose estimated memory ``need`` [bytes] exceeds what is available."""
    have = available_memory()
    if have is not None and need > have:
        raise RetolError(
            field,
            f"would need about {need / 1e9:.3g} GB of memory; {have / 1e9:.3g} GB is available",
            fix,
        )
