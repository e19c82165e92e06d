"""The README's reference lists, generated from their declarations: the quantities
(:mod:`obsprep.model.quantities`: names, standard names, units, built-in valid ranges), the SST
types, the default flag meanings and flags that keep or reject rows (the readers' option
declarations and ``DEFAULT_REJECT*`` constants of the reader modules), and the signs of model
output (:mod:`obsprep.readers.model_output`).

Each list sits in the README between ``<!-- generated: NAME -->`` and ``<!-- end generated:
NAME -->``; ``python -m obsprep.readers.reference README.md`` rewrites them in place, and a
test checks that the README holds what the declarations say.
"""

from __future__ import annotations

import dataclasses
import importlib
import pkgutil
import re
import sys
from pathlib import Path

from obsprep.model.quantities import QUANTITIES, SST_QUANTITY_NAMES


def _code(items) -> str:
    return ", ".join(f"`{item}`" for item in items) or "-"


def _number(value) -> str:
    return f"{value:g}"


def quantities_table() -> str:
    """Markdown table of the quantities: name, standard_name written, canonical units,
    surface or profile, CF standard names accepted, built-in valid range, and the default
    representation error and error floor of its super-observations (typical values, from
    memory)."""
    lines = ["| quantity | standard_name written | units | kind | standard names read "
             "| built-in valid range | default representation error | default error floor |",
             "|---|---|---|---|---|---|---|---|"]
    for q in QUANTITIES.values():
        low, high = q.valid_range
        kind = "surface" if q.surface else "profile"
        if q.vector:
            kind += f", {q.component} component of {q.vector}"
        lines.append(f"| `{q.name}` | `{q.standard_name}` | `{q.units}` | {kind} | "
                     f"{_code(q.accepted_standard_names)} | "
                     f"[{_number(low)}, {_number(high)}] {q.units} | "
                     f"{_number(q.default_representation_error)} {q.units} | "
                     f"{_number(q.default_error_floor)} {q.units} |")
    return "\n".join(lines)


def sst_types() -> list[tuple[str, str]]:
    """The SST types as (type, quantity): each SST quantity (``SST_QUANTITY_NAMES``), its type
    named by its CF standard name (skin, subskin, foundation; plain ``sea_surface_temperature``
    is SST at a depth or of unstated type)."""
    types = []
    for name in SST_QUANTITY_NAMES:
        kind = name.removeprefix("sea_surface_").removesuffix("_temperature")
        types.append(("at a depth, or unstated" if kind == "temperature" else kind, name))
    return types


def sst_types_table() -> str:
    """Markdown table of the SST types (:func:`sst_types`)."""
    lines = ["| SST type | quantity (its CF standard_name) |", "|---|---|"]
    lines += [f"| {kind} | `{name}` |" for kind, name in sst_types()]
    return "\n".join(lines)


def _reader_modules():
    from obsprep.readers import cf, products

    for package in (cf, products):
        for info in sorted(pkgutil.iter_modules(package.__path__), key=lambda i: i.name):
            yield importlib.import_module(f"{package.__name__}.{info.name}")


def _strings(value) -> tuple | None:
    """``value`` as a tuple of str when it is a non-empty collection of str, else None
    (frozensets sorted, so the README does not depend on hashing)."""
    if isinstance(value, str) or not isinstance(value, (tuple, list, frozenset, set)):
        return None
    if not value or not all(isinstance(v, str) for v in value):
        return None
    return tuple(sorted(value)) if isinstance(value, (frozenset, set)) else tuple(value)


def flag_defaults() -> list[dict]:
    """The default lists of flag meanings (or flag values) that decide which rows a reader
    keeps or rejects, each {"where", "keeps", "meanings"}: reader options whose name says
    reject or good/keep and whose default is a list of str (identical defaults of several
    readers in one entry), then module constants named ``DEFAULT_REJECT*`` of the reader
    modules that no option already shows."""
    from obsprep.readers import registered_readers

    entries: dict[tuple, dict] = {}
    for kind, reader in registered_readers().items():
        for field in dataclasses.fields(reader.Options):
            name = field.name.lower()
            rejects = "reject" in name
            keeps = "good" in name or "keep" in name
            if not (rejects or keeps):
                continue
            default = field.default
            if default is dataclasses.MISSING and field.default_factory is not dataclasses.MISSING:
                default = field.default_factory()
            meanings = _strings(default)
            if meanings is None:
                continue
            key = (field.name, meanings)
            entry = entries.setdefault(key, {"option": field.name, "kinds": [], "keeps": keeps,
                                             "meanings": meanings})
            entry["kinds"].append(kind)
    shown = {entry["meanings"] for entry in entries.values()}
    result = [{"where": f"option `{e['option']}` of " + _code(e["kinds"]), "keeps": e["keeps"],
               "meanings": e["meanings"]} for e in entries.values()]
    for module in _reader_modules():
        for name, value in vars(module).items():
            meanings = _strings(value)
            if not name.startswith("DEFAULT_REJECT") or meanings is None or meanings in shown:
                continue
            shown.add(meanings)
            result.append({"where": f"`{module.__name__}.{name}`", "keeps": False,
                           "meanings": meanings})
    return result


def flag_meanings_table() -> str:
    """Markdown table of :func:`flag_defaults`."""
    lines = ["| where declared | effect | default meanings (or flags) |", "|---|---|---|"]
    for entry in flag_defaults():
        effect = ("keeps these; any other meaning rejects" if entry["keeps"]
                  else "rejects these")
        lines.append(f"| {entry['where']} | {effect} | {_code(entry['meanings'])} |")
    return "\n".join(lines)


def model_output_signs_list() -> str:
    """Markdown list of the signs of model output (:mod:`obsprep.readers.model_output`)."""
    from obsprep.readers import model_output as m

    return "\n".join([
        "- a dimension named " + _code(m.ENSEMBLE_DIMENSION_NAMES) + " (case-insensitive), or "
        "starting with " + _code(m.ENSEMBLE_PREFIXES),
        "- a variable of CF standard_name " + _code(m.MODEL_STANDARD_NAMES),
        "- a `cell_methods` entry over `realization` (an ensemble statistic)",
        "- a `formula_terms` attribute (a CF parametric vertical coordinate: model levels)",
        "- a variable with `cf_role` " + _code(m.MODEL_CF_ROLES) + " (UGRID, SGRID)",
        "- the global attribute " + _code(m.MODEL_GLOBAL_ATTRIBUTES) + ", or a `source_type` "
        "naming a model: " + _code(m.MODEL_SOURCE_TYPES) + " (CMIP6)",
    ])


#: the generated blocks of the README, name -> generator
GENERATED = {
    "quantities": quantities_table,
    "sst-types": sst_types_table,
    "flag-meanings": flag_meanings_table,
    "model-output-signs": model_output_signs_list,
}


def _block(name: str) -> re.Pattern:
    return re.compile(rf"(<!-- generated: {re.escape(name)} -->\n)(.*?)(<!-- end generated: "
                      rf"{re.escape(name)} -->)", re.DOTALL)


def generated_blocks(text: str) -> dict[str, str]:
    """The generated blocks found in README ``text``, name -> content (without markers)."""
    found = {}
    for name in GENERATED:
        match = _block(name).search(text)
        if match:
            found[name] = match.group(2)
    return found


def rewrite(text: str) -> str:
    """README ``text`` with every generated block replaced by what its generator writes now;
    raises ValueError for a block whose markers are missing."""
    for name, generator in GENERATED.items():
        pattern = _block(name)
        if not pattern.search(text):
            raise ValueError(f"README has no block '<!-- generated: {name} -->'")
        text = pattern.sub(lambda m, g=generator: m.group(1) + g() + "\n" + m.group(3), text)
    return text


def main(argv=None) -> int:
    """``python -m obsprep.readers.reference README.md``: rewrite the generated blocks."""
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python -m obsprep.readers.reference README.md", file=sys.stderr)
        return 2
    path = Path(argv[0])
    path.write_text(rewrite(path.read_text()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
