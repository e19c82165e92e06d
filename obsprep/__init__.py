"""obsprep: ocean and sea-ice observations to model-grid super-observations."""

from importlib.metadata import PackageNotFoundError
from importlib.metadata import version as _version

try:
    __version__ = _version("obsprep")
except PackageNotFoundError:  # running from a source tree without installing
    __version__ = "0.0.0+unknown"

from obsprep.exceptions import ConfigError, InputFileError, NoReaderError, ObsprepError  # noqa: E402
from obsprep.model.table import COLUMNS, make_table  # noqa: E402


def read(path, kind=None, **options):
    """Read one observation file into the observation table (see :mod:`obsprep.model.table`).

    ``kind=None`` asks every registered reader whether it can open the file.
    """
    from obsprep.readers import read as _read

    return _read(path, kind=kind, **options)


def build(config, date=None, out=None, strict=False, progress=False, jobs=1, scheduler=None):
    """Run the nightly super-observation build; see :func:`obsprep.run.build.build`."""
    from obsprep.run.build import build as _build

    return _build(config, date=date, out=out, strict=strict, progress=progress, jobs=jobs,
                  scheduler=scheduler)


__all__ = ["read", "build", "make_table", "COLUMNS", "ObsprepError", "InputFileError",
           "NoReaderError", "ConfigError", "__version__"]
