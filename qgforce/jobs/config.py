"""The command line's option files: TOML with a [defaults] table and one table per command.

Read by :mod:`qgforce.cli` (``--config``): the file is size-limited and every value is checked for
depth, length and item count before any option reads it, so a damaged or hostile file gives one
clear line, never a traceback or a hang.  Values are converted and checked as the command line's
own values are (in :mod:`qgforce.cli`).
"""

from __future__ import annotations

from ..errors import InputDataError

__all__ = ["read_config", "config_options", "shown", "MAX_BYTES", "MAX_DEPTH", "MAX_ITEMS", "MAX_CHARS"]

#: Longest value a message quotes in full (a longer one is shown by its start and its length).
SHOWN_CHARS = 80


def shown(value) -> str:
    """``repr(value)``, or its start and its size when long: a message never echoes a huge value."""
    text = repr(value)
    if len(text) <= SHOWN_CHARS:
        return text
    size = f"{len(value)} items" if isinstance(value, (list, tuple, dict)) else f"{len(text)} characters"
    return f"{text[:40]}... ({size})"



def read_config(path: str, tables) -> dict:
    """The TOML option file at ``path``, its tables and values checked (see the module docstring).

    Parameters
    ----------
    path : str
        The file.
    tables : sequence of str
        The tables it may hold (``defaults`` and the command names).

    Raises
    ------
    InputDataError
        Missing, unreadable, not UTF-8, not TOML, too large or too deeply nested, an unknown table, or a
        table that is a plain value (the message names the file and the place).
    """
    try:
        import tomllib
    except ImportError:  # Python 3.10
        import tomli as tomllib
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_BYTES + 1)
        if len(raw) > MAX_BYTES:
            raise InputDataError(f"config file {path!r} is larger than {MAX_BYTES // 1024} KiB; an option "
                                 "file is a few lines (file lists belong on the command line or in a glob)")
        data = tomllib.loads(raw.decode("utf-8"))
    except RecursionError:
        raise InputDataError(f"config file {path!r} nests arrays or tables too deeply to read; option values are "
                             f"plain values or lists of them (at most {MAX_DEPTH} levels)") from None
    except UnicodeDecodeError as exc:
        raise InputDataError(f"config file {path!r} is not UTF-8 text: {exc.reason} at byte {exc.start}") from None
    except FileNotFoundError:
        raise InputDataError(f"config file not found: {path!r}") from None
    except OSError as exc:
        raise InputDataError(f"cannot read the config file {path!r}: {exc.strerror or exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputDataError(f"config file {path!r} is not valid TOML: {exc}") from None
    known_tables = tuple(tables)
    for table, content in data.items():
        if table not in known_tables:
            raise InputDataError(
                f"config file {path!r}: unknown table [{table}]; the tables are "
                + ", ".join(f"[{t}]" for t in known_tables)
            )
        if not isinstance(content, dict):
            raise InputDataError(f"config file {path!r}: {table} must be a table [{table}], found {shown(content)}")
        for key, value in content.items():
            _check_value(value, f"config file {path!r}: [{table}] {key}")
    return data


#: Limits of a config file: its size, the nesting of its values, items per list, characters per text.
MAX_BYTES = 1 << 20
MAX_DEPTH = 3
MAX_ITEMS = 10000
MAX_CHARS = 4096


def _check_value(value, where: str) -> None:
    """Refuse a config value nested deeper, longer or larger than any option needs (no recursion)."""
    stack = [(value, 1)]
    while stack:
        item, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise InputDataError(f"{where}: values nested more than {MAX_DEPTH} levels deep; an option is a "
                                 "plain value, a list of plain values or a table of them")
        if isinstance(item, str) and len(item) > MAX_CHARS:
            raise InputDataError(f"{where}: a text of {len(item)} characters; at most {MAX_CHARS} are "
                                 "accepted (a path, a list of names or a time range is far shorter)")
        if isinstance(item, (list, dict)):
            if len(item) > MAX_ITEMS:
                raise InputDataError(f"{where}: {len(item)} items; at most {MAX_ITEMS} are accepted")
            children = item.values() if isinstance(item, dict) else item
            stack.extend((child, depth + 1) for child in children)


def config_options(data: dict, command: str, path: str, usable, every) -> tuple[dict, dict]:
    """(values from [defaults], values from [command]), keys checked against the known options.

    ``usable``: the option names of ``command``; ``every``: those of every command (what [defaults] may set).
    """
    out = []
    for table, allowed in (("defaults", every), (command, usable)):
        values = {}
        for key, value in data.get(table, {}).items():
            dest = key.replace("-", "_")
            if dest not in allowed:
                raise InputDataError(
                    f"config file {path!r}: unknown key {key!r} in [{table}]; the known keys are "
                    + ", ".join(k.replace("_", "-") for k in allowed)
                )
            values[dest] = value
        out.append(values)
    return out[0], out[1]
