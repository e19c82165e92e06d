"""``obsprep inspect --kinds``: the reader list comes from the readers' own declarations."""

from __future__ import annotations

import dataclasses

from click.testing import CliRunner

from obsprep.cli.main import cli
from obsprep.readers import registered_readers


def test_kinds_lists_every_registered_reader_with_its_declared_options():
    result = CliRunner().invoke(cli, ["inspect", "--kinds"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    kinds = [line.split(":")[0] for line in lines if not line.startswith(" ")]
    assert kinds == list(registered_readers())  # guessing order
    for kind, reader in registered_readers().items():
        block = lines[lines.index(f"{kind}: {reader.description}") + 1:]
        listed = []
        for line in block:
            if not line.startswith("  option "):
                break
            listed.append(line[len("  option "):].split(":")[0])
        # reference: the fields of the reader's own options dataclass
        assert listed == [f.name for f in dataclasses.fields(reader.Options)], kind


def test_inspect_without_files_or_kinds_is_a_usage_error():
    result = CliRunner().invoke(cli, ["inspect"])
    assert result.exit_code == 2
    assert "--kinds" in result.output
