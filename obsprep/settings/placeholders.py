"""The ``{...}`` placeholders of path patterns and times: which exist, how they expand.

One module serves both the load-time check and the expansion, so a pattern that passes the
check is one the build can expand.  ``sources[].paths`` and ``output.name`` accept ``{date}``
and ``{date:<strftime format>}`` (the UTC day, a datetime at 00:00); ``window.analysis_time``
accepts ``{date}`` only (the run date as YYYY-MM-DD).  ``output.name`` must also stay a plain
file name once expanded (:func:`check_file_name`), so the build writes only inside its output
directory.
"""

from __future__ import annotations

import datetime as dt
import string

from obsprep.exceptions import ConfigError

#: placeholder names a path pattern or output name may use
PATH_PLACEHOLDERS = ("date",)
#: placeholder names ``window.analysis_time`` may use
TIME_PLACEHOLDERS = ("date",)

_CHECK_DAY = dt.datetime(2001, 2, 3)


def _fields(pattern: str, key: str, source) -> list[tuple[str, str]]:
    """The (name, format spec) of each placeholder; ConfigError on malformed braces."""
    try:
        parsed = list(string.Formatter().parse(pattern))
    except ValueError as exc:
        raise ConfigError(key, f"malformed placeholder in '{pattern}' ({exc}); expected "
                          "'{date}' or '{date:<strftime format>}', and '{{' '}}' for literal braces",
                          source) from None
    return [(name, spec or "") for _, name, spec, _ in parsed if name is not None]


def check_path_pattern(pattern: str, key: str, source=None) -> None:
    """Raise ConfigError naming ``key`` unless ``pattern`` expands with :func:`expand_path`."""
    for name, _spec in _fields(pattern, key, source):
        if name not in PATH_PLACEHOLDERS:
            import difflib

            hint = difflib.get_close_matches(name, PATH_PLACEHOLDERS, n=1)
            raise ConfigError(key, f"unknown placeholder '{{{name}}}' in '{pattern}'"
                              + (f"; did you mean '{{{hint[0]}}}'?" if hint else "")
                              + f"; known: {', '.join('{' + p + '}' for p in PATH_PLACEHOLDERS)}",
                              source)
    try:
        expand_path(pattern, _CHECK_DAY)
    except (ValueError, TypeError, KeyError, IndexError) as exc:
        raise ConfigError(key, f"placeholder format in '{pattern}' fails: {exc}", source) from None


def _file_name_problem(name: str) -> str | None:
    """Why ``name`` is not a plain file name inside a directory, or None when it is one."""
    if not name.strip():
        return "is empty"
    if "/" in name or "\\" in name:
        return "contains a path separator; it must be a file name inside output.directory"
    if "\0" in name:
        return "contains a NUL character"
    if name.startswith("."):
        # covers "." and "..", and hidden names, which would also clash with the writers'
        # temporaries (a leading dot marks them)
        return "starts with a dot (hidden file, '.' or '..'); it must be a plain file name"
    return None


def check_file_name(pattern: str, key: str, source=None, day: dt.datetime | None = None) -> None:
    """Raise ConfigError naming ``key`` unless ``pattern`` is a valid pattern that expands to a
    plain file name: not empty, no path separator (so not absolute and no ``..`` component),
    no leading dot.  Checked on the pattern itself and on its expansion for a sample day and
    for ``day`` (the run date), since a strftime format such as ``%D`` adds separators."""
    check_path_pattern(pattern, key, source)
    expansions = [pattern, expand_path(pattern, _CHECK_DAY)]
    if day is not None:
        expansions.append(expand_path(pattern, day))
    for name in expansions:
        problem = _file_name_problem(name)
        if problem:
            shown = f"'{pattern}'" if name == pattern else f"'{pattern}' (expanded: '{name}')"
            raise ConfigError(key, f"{shown} {problem}", source)


def expand_path(pattern: str, day: dt.datetime) -> str:
    """Fill ``{date}``/``{date:<strftime>}`` of a path pattern or output name with ``day`` (UTC)."""
    return pattern.format(date=day) if "{" in pattern or "}" in pattern else pattern


def check_time_text(text: str, key: str, source=None) -> None:
    """Raise ConfigError naming ``key`` unless ``text`` uses only a bare ``{date}``."""
    for name, spec in _fields(text, key, source):
        if name not in TIME_PLACEHOLDERS or spec:
            raise ConfigError(key, f"unknown placeholder '{{{name}{':' + spec if spec else ''}}}' in "
                              f"'{text}'; only '{{date}}' (the run date YYYY-MM-DD) is filled", source)


def expand_time(text: str, run_date: dt.date) -> str:
    """Fill ``{date}`` of ``window.analysis_time`` with the run date as YYYY-MM-DD."""
    return text.replace("{date}", run_date.isoformat())
