"""Reader options: the option field, value parsers and the options shared by readers."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

#: flag meanings kept by default (docs/file-conventions.md)
DEFAULT_GOOD_FLAG_MEANINGS = frozenset(
    ("good", "good_data", "nominal", "ok", "valid", "probably_good"))


def option(default, meaning: str, parse=None):
    """A reader option: a dataclass field with its ``meaning`` (shown in errors and docs) and
    ``parse(name, value)``, which checks a given value and returns it in the field's type
    (raising ``ValueError`` naming the option)."""
    return dataclasses.field(default=default, metadata={"meaning": meaning, "parse": parse})


def parse_string(name, value) -> str:
    """A str option."""
    if not isinstance(value, str):
        raise ValueError(f"option '{name}' must be a string, got {value!r}")
    return value


def parse_names(name, value) -> tuple:
    """A list of str, or one space-separated str, as a tuple."""
    names = value.split() if isinstance(value, str) else value
    if isinstance(names, (bytes, dict)) or not hasattr(names, "__iter__"):
        raise ValueError(f"option '{name}' must be strings, got {value!r}")
    names = tuple(names)
    if not all(isinstance(n, str) for n in names):
        raise ValueError(f"option '{name}' must be strings, got {value!r}")
    return names


def parse_lowercase_set(name, value) -> frozenset:
    """A list of str, or one space-separated str, as a set of lowercase str."""
    return frozenset(n.lower() for n in parse_names(name, value))


def parse_positive_seconds(name, value) -> float:
    """A positive number of seconds as float."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        raise ValueError(f"option '{name}' must be a positive number of seconds, got {value!r}")
    return float(value)


@dataclass(frozen=True)
class SourceOptions:
    """Options every reader accepts."""

    sensor: str = option("", "source name written to the 'sensor' column (default: empty)",
                         parse_string)
    platform: str | None = option(
        None, "platform identifier written to every row, overriding the file's own "
              "(default: the file's 'platform' global attribute)", lambda name, value: str(value))


@dataclass(frozen=True)
class CfOptions(SourceOptions):
    """Options of the CF-generic readers, which keep rows by their flag meanings."""

    good_flag_meanings: frozenset = option(
        DEFAULT_GOOD_FLAG_MEANINGS, "flag meanings whose rows are kept (list of str, or one "
                                    "space-separated str; default: good good_data nominal ok "
                                    "valid probably_good)", parse_lowercase_set)


def option_meanings(options_class) -> dict[str, str]:
    """Name -> meaning of the options of a reader's options dataclass, in declaration order."""
    return {f.name: f.metadata["meaning"] for f in dataclasses.fields(options_class)}


def declared_options(reader, options: dict) -> dict:
    """The entries of ``options`` that ``reader`` declares (a source of kind auto gives one
    set of options to whichever reader claims its file; each takes its own)."""
    return {name: value for name, value in options.items() if name in reader.options}


def reader_options(reader, options: dict):
    """Check ``options`` against ``reader.Options`` and return an instance of it.

    Raises ``TypeError`` naming an unknown option and listing the accepted ones, and
    ``ValueError`` for a value of the wrong kind, so a typo in a configuration fails at once.
    A value of None means the option's default.
    """
    fields = {f.name: f for f in dataclasses.fields(reader.Options)}
    unknown = sorted(set(options) - set(fields))
    if unknown:
        raise TypeError(
            f"unknown option(s) {', '.join(repr(u) for u in unknown)} for reader "
            f"'{reader.kind}'; accepted options: {', '.join(fields)}")
    values = {}
    for name, value in options.items():
        if value is None:
            continue
        parse = fields[name].metadata.get("parse")
        values[name] = parse(name, value) if parse is not None else value
    return reader.Options(**values)
