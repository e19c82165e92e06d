"""The reader seam.

A reader is one small class in one module::

    @register_reader
    class AlongTrackReader(Reader):
        kind = "alongtrack"
        description = "along-track altimetry (CF point/trajectory series)"

        Options = AlongTrackOptions  # a frozen dataclass of cf.option fields

        def guess_can_open(self, ds) -> bool: ...
        def read_dataset(self, ds, path, *, options, leave_out_rejected,
                         reading_part) -> pandas.DataFrame: ...

``guess_can_open`` and ``read_dataset`` receive the file already opened by
:func:`obsprep.readers.cf.open_dataset` (CF packing and fill decoded, times *not* decoded), so
readers never repeat the CF decoding; they find variables by standard_name and return an
observation table (:func:`obsprep.model.table.make_table`).  ``options`` is an instance of
the reader's ``Options`` (parsed once by :func:`obsprep.readers.read`).
"""

from __future__ import annotations

import pandas as pd
import xarray as xr

from obsprep.readers.cf import CfOptions, option_meanings


class Reader:
    """Base class of observation readers; subclasses set ``kind`` and ``description``."""

    kind: str = ""
    description: str = ""
    #: the reader's options: a frozen dataclass of :func:`obsprep.readers.cf.option` fields
    Options: type = CfOptions
    #: reader options a config may pass, name -> meaning (shown in errors and docs); derived
    #: from ``Options``
    options: dict[str, str] = option_meanings(CfOptions)
    #: order of guessing: readers of a specific format (higher) are asked before CF-generic ones
    priority: int = 0

    def __init_subclass__(cls, **kwargs):
        super().__init_subclass__(**kwargs)
        cls.options = option_meanings(cls.Options)

    def guess_can_open(self, ds: xr.Dataset) -> bool:  # pragma: no cover - interface
        """Return True when this reader recognises ``ds`` from its metadata alone."""
        raise NotImplementedError

    def read_dataset(self, ds: xr.Dataset, path: str, *, options, leave_out_rejected: bool,
                     reading_part: bool) -> pd.DataFrame:  # pragma: no cover - interface
        """Return the observation table for ``ds`` (opened from ``path``).

        ``options`` is an instance of :attr:`Options`; with ``leave_out_rejected`` the rows
        the reader rejects may be left out and counted (``leave_out_rejected`` of
        :func:`obsprep.readers.cf.observation_table`); ``reading_part`` says ``ds`` is one part
        of a file (see :meth:`slice_dimension`), where rows all of fill are ordinary."""
        raise NotImplementedError

    def slice_dimension(self, ds: xr.Dataset) -> str | None:
        """A dimension along which ``ds`` may be read in parts, or None (read it whole).

        The rows of a swath or a grid are independent observations: a reader that says so here
        gets each part as ``ds.isel({dimension: slice})`` and reads it like a whole file, so
        one huge file (a global L3 grid, a full-orbit swath) is read, checked and accumulated
        a part at a time within the build's memory.  The ``row`` numbers are mapped back to
        the whole file by :func:`obsprep.readers.read`.  Not for readers whose rows depend on
        each other (passes split at time gaps, profiles).
        """
        return None


_REGISTRY: dict[str, Reader] = {}


def register_reader(cls):
    """Class decorator: register a :class:`Reader` subclass under its ``kind``."""
    if not cls.kind:
        raise ValueError(f"reader {cls.__name__} has no kind")
    if cls.kind in _REGISTRY and type(_REGISTRY[cls.kind]) is not cls:
        raise ValueError(f"reader kind '{cls.kind}' is registered twice")
    _REGISTRY[cls.kind] = cls()
    return cls


def registered_readers() -> dict[str, Reader]:
    """Mapping kind -> reader instance, in guessing order: by descending ``priority``, then in
    registration order."""
    ordered = sorted(_REGISTRY.items(), key=lambda item: -item[1].priority)
    return dict(ordered)


def accepted_options(kind: str) -> list[str]:
    """The option names a source of reader ``kind`` may give, sorted; for ``"auto"``, those
    that any registered reader declares."""
    readers = registered_readers()
    candidates = readers.values() if kind in (None, "auto") else [readers[kind]]
    return sorted({name for reader in candidates for name in reader.options})


def validate_options(kind: str, options: dict, key: str, source=None) -> None:
    """Check a source's reader options at configuration load, before any file is opened.

    ``kind`` is a registered kind, or ``"auto"``: then each option must be one that some
    registered reader declares.  Raises :class:`~obsprep.exceptions.ConfigError` naming
    ``<key>.<option>`` and what was expected.
    """
    from obsprep.exceptions import ConfigError
    from obsprep.readers.cf import declared_options, reader_options

    readers = registered_readers()
    candidates = list(readers.values()) if kind == "auto" else [readers[kind]]
    accepted = accepted_options(kind)
    for name in options:
        if name not in accepted:
            import difflib

            hint = difflib.get_close_matches(name, accepted, n=1)
            raise ConfigError(f"{key}.{name}", "unknown reader option"
                              + (f"; did you mean '{hint[0]}'?" if hint else "")
                              + f"; reader '{kind}' accepts: {', '.join(accepted)}", source)
    for reader in candidates:
        for name, value in declared_options(reader, options).items():
            try:  # one option at a time, so the error names the one that is wrong
                reader_options(reader, {name: value})
            except (TypeError, ValueError) as exc:
                raise ConfigError(f"{key}.{name}", str(exc), source) from None
