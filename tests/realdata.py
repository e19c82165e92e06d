"""The real provider files of ``../shared/realdata`` (beside the project root; provenance in its
README): tests that read one skip, naming the folder, where it is absent (a fresh clone)."""

from __future__ import annotations

from pathlib import Path

import pytest

#: the folder of real files, relative to the project root
REALDATA = Path(__file__).resolve().parents[1].parent / "shared" / "realdata"


def real_file(relative: str) -> Path:
    """The real file ``relative`` (e.g. ``"argo/D4900882_029.nc"``) under :data:`REALDATA`;
    skips the calling test with a message naming the folder when the file is not there."""
    path = REALDATA / relative
    if not path.exists():
        pytest.skip(f"real file {relative} not found: the folder {REALDATA} (../shared/realdata "
                    "beside the project root) is absent")
    return path
