"""The documentation in docs/ describes the code as it is.

Checked against the code itself (the command-line parser, the field tables of the file
parsers) and against what the cheap commands print with ``--json`` on the demo files in
``recipes/``: every registered command has its section in docs/contract.md with every
option, every printed JSON key is named in its command's section (or in the shared
objects), every accepted file field is named in docs/formats.md, the examples there parse,
links between the documents resolve, and nothing points at a design file that is not in
the repository.  A failure names what is missing and where.
"""

from __future__ import annotations

import argparse
import json
import re
import tomllib
from pathlib import Path

import pytest

from phantomlab.cli import build_parser, main

ROOT = Path(__file__).resolve().parents[2]
DOCS = ROOT / "docs"
RECIPES = ROOT / "recipes"
RECIPE = RECIPES / "demo-nir-liquid.toml"
MEASUREMENT = RECIPES / "measurements" / "demo-nir-liquid-srdr.csv"
DOC_FILES = ("design.md", "contract.md", "formats.md")


def _read(path: Path) -> str:
    return path.read_text(encoding="utf-8")


def _sections(text: str, level: str = "## ") -> dict[str, str]:
    """Heading text -> body, for every heading of exactly this level."""
    sections: dict[str, str] = {}
    name = None
    for line in text.splitlines():
        if line.startswith(level) and not line.startswith(level + "#"):
            name = line[len(level):].strip()
            sections[name] = ""
        elif name is not None:
            sections[name] += line + "\n"
    return sections


def _code_words(text: str) -> set[str]:
    """Every identifier inside a code span or fenced block of ``text``."""
    spans = re.findall(r"```.*?```|`[^`\n]+`", text, flags=re.S)
    return {word for span in spans for word in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", span)}


def _leaf_commands(parser: argparse.ArgumentParser, path: str = "phantomlab"):
    subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    if not subs:
        yield path, parser
        return
    for action in subs:
        for name, sub in action.choices.items():
            yield from _leaf_commands(sub, f"{path} {name}")


CONTRACT = _read(DOCS / "contract.md")
FORMATS = _read(DOCS / "formats.md")
CONTRACT_SECTIONS = _sections(CONTRACT)
FORMAT_SECTIONS = _sections(FORMATS)
COMMANDS = dict(_leaf_commands(build_parser()))


def _command_text(command: str) -> str:
    """The sections of one command (``phantomlab plan`` and ``phantomlab plan --series``)."""
    return "".join(body for name, body in CONTRACT_SECTIONS.items()
                   if name == command or name.startswith(command + " -"))


def test_every_registered_command_has_its_section():
    missing = [c for c in COMMANDS if f"## {c}\n" not in CONTRACT]
    assert not missing, f"docs/contract.md lacks a '## COMMAND' section for: {', '.join(missing)}"
    assert len(COMMANDS) >= 20  # the parser walk found the sub-commands (stock optics, batch add, ...)


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_every_option_is_named_in_its_section(command):
    text = _command_text(command)
    options = [o for a in COMMANDS[command]._actions for o in a.option_strings
               if o.startswith("--") and o != "--help"]
    missing = [o for o in options if not re.search(rf"(?<![\w-]){re.escape(o)}(?![\w-])", text)]
    assert not missing, f"docs/contract.md, section '{command}': options not described: {', '.join(missing)}"


def _keys(value, skip: frozenset = frozenset()) -> set[str]:
    """Every key of every object in a JSON value (not below the keys in ``skip``)."""
    found: set[str] = set()
    if isinstance(value, dict):
        for key, item in value.items():
            found.add(key)
            if key not in skip:
                found |= _keys(item, skip)
    elif isinstance(value, list):
        for item in value:
            found |= _keys(item, skip)
    return found


def _run(capsys, *argv) -> dict:
    status = main([*map(str, argv), "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


RELATIVE_SRDR = MEASUREMENT.read_text(encoding="utf-8").replace("reflectance_per_mm2", "reflectance_relative")

CHEAP_RUNS = {
    "stock optics": ("phantomlab stock optics",
                     ["stock", "optics", RECIPES / "demo-stocks.toml", "ps1000", "--matrix", "water",
                      "--wavelength-nm", "600:900:100"]),
    "plan": ("phantomlab plan", ["plan", RECIPE]),
    "plan by mass": ("phantomlab plan", ["plan", RECIPES / "demo-silicone.toml"]),
    "plan with g": ("phantomlab plan", ["plan", RECIPES / "demo-gel-g.toml"]),
    "forward srdr": ("phantomlab forward",
                     ["forward", "--kind", "srdr", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.33",
                      "--rho-mm", "1:10:1", "--wavelength-nm", "650"]),
    "forward sfdi": ("phantomlab forward",
                     ["forward", "--kind", "sfdi", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4",
                      "--fx-per-mm", "0,0.05,0.1"]),
    "forward total": ("phantomlab forward",
                      ["forward", "--kind", "total", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4"]),
    "forward slab": ("phantomlab forward",
                     ["forward", "--kind", "slab", "--mua-per-mm", "0.1", "--mus-per-mm", "9", "--g", "0.75",
                      "--n", "1.4", "--thickness-mm", "1", "--n-slide", "1.52"]),
    "forward td": ("phantomlab forward",
                   ["forward", "--kind", "td", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4",
                    "--rho-mm", "15", "--time-ps", "100:2000:100"]),
    "forward td transmittance": ("phantomlab forward",
                                 ["forward", "--kind", "td", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4",
                                  "--rho-mm", "0", "--time-ps", "100:2000:100", "--geometry", "transmittance",
                                  "--thickness-mm", "20"]),
    "forward fd": ("phantomlab forward",
                   ["forward", "--kind", "fd", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4",
                    "--rho-mm", "10,20", "--frequency-mhz", "100,200"]),
    "fit srdr": ("phantomlab fit", ["fit", MEASUREMENT, "--kind", "srdr", "--model", "kienle1997"]),
    "fit td": ("phantomlab fit", ["fit", RECIPES / "measurements" / "demo-reference-td.csv", "--kind", "td"]),
    "fit fd": ("phantomlab fit", ["fit", RECIPES / "measurements" / "demo-reference-fd.csv", "--kind", "fd"]),
    "fit srdr power law": ("phantomlab fit", ["fit", MEASUREMENT, "--kind", "srdr", "--musp-power-law"]),
}


@pytest.mark.parametrize("run", sorted(CHEAP_RUNS))
def test_every_printed_key_is_in_the_contract(run, capsys):
    command, argv = CHEAP_RUNS[run]
    payload = _run(capsys, *argv)
    printed = _keys(payload, frozenset({"preparation"}))
    named = _code_words(_command_text(command) + CONTRACT_SECTIONS["Shared objects"]
                        + CONTRACT_SECTIONS["General rules"])
    missing = sorted(printed - named)
    assert not missing, f"docs/contract.md, section '{command}': keys printed but not described: {missing}"
    # the plan's `preparation` is the recipe's [preparation] table: described in docs/formats.md
    preparation = _keys(payload.get("preparation", {}))
    missing = sorted(preparation - _code_words(FORMAT_SECTIONS["Recipe file (TOML)"]))
    assert not missing, f"docs/formats.md, section 'Recipe file (TOML)': [preparation] fields not described: {missing}"


def test_keys_of_relative_data_and_of_a_logged_batch_are_in_the_contract(tmp_path, capsys):
    relative = tmp_path / "relative.csv"
    relative.write_text(RELATIVE_SRDR, encoding="utf-8")
    (tmp_path / "relative.toml").write_text("n = 1.33\n", encoding="utf-8")
    fit = _keys(_run(capsys, "fit", relative, "--kind", "srdr"))
    assert {"scale_factor", "scale_factor_sd"} <= fit
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    added = _run(capsys, "batch", "add", RECIPE, "--db", db)
    listed = _run(capsys, "batch", "list", "--db", db)
    for command, keys in (("phantomlab fit", fit),
                          ("phantomlab batch add", _keys(added, frozenset({"potencies_used", "lots", "preparation"}))
                           | _keys(added["potencies_used"][added["doses"][0]["stock"]])),
                          ("phantomlab batch list", _keys(listed))):
        named = _code_words(_command_text(command) + CONTRACT_SECTIONS["Shared objects"]
                            + CONTRACT_SECTIONS["General rules"])
        missing = sorted(keys - named)
        assert not missing, f"docs/contract.md, section '{command}': keys printed but not described: {missing}"


# ---- file formats --------------------------------------------------------------------------


def _format_fields():
    from phantomlab.calibration import measurement_metadata, measurements
    from phantomlab.materials import stock
    from phantomlab.recipe import limits, preparation, recipe_file, targets
    from phantomlab.store.schema import Base
    from phantomlab.transport.montecarlo import baseline

    yield "Stock file (TOML)", {f for fields in stock._FIELDS.values() for f in fields} | set(stock.HAZARD_KEYS) \
        | set(stock.KINDS) | set(stock.EMULSION_MODELS)
    yield "Recipe file (TOML)", set(recipe_file._TOP_LEVEL) | set(targets._KNOWN_KEYS) | set(limits._FIELDS) \
        | set(preparation.PREPARATION_KINDS) \
        | {f for fields in preparation.PREPARATION_KINDS.values() for f in fields}
    yield "Measurement CSV", {c for alternatives in measurements._VALUE_COLUMNS.values() for cols in alternatives
                              for c in cols} | {c for cols in measurements._SD_COLUMNS.values() for c in cols} \
        | {a for a in measurements.KINDS.values() if a} | set(measurements.KINDS)
    from phantomlab.calibration import sphere_readings

    from phantomlab.calibration import fd_measurements, td_measurements

    yield "Measurement CSV", set(td_measurements.TD_COLUMNS) | set(td_measurements.IRF_COLUMNS) \
        | set(fd_measurements.FD_COLUMNS) | set(fd_measurements.FD_SD_COLUMNS)
    yield "Measurement sidecar (TOML)", set(td_measurements.TD_KEYS) | set(fd_measurements.FD_KEYS)
    yield "Measurement sidecar (TOML)", set(measurement_metadata._METADATA_KEYS) | {
        "wavelength_nm", "mua_per_mm", "musp_per_mm", "mua_sd_per_mm", "musp_sd_per_mm", "reading_csv"} \
        | set(sphere_readings.SPHERE_KEYS) | set(sphere_readings.TRANSMISSION_KEYS)
    yield "Amounts CSV", {"stock", "volume_ml", "mass_g", "dilution_factor"}
    yield "Monte Carlo baseline (.npz)", set(baseline.PHOTON_ARRAYS) | set(baseline.INPUT_KEYS) | {"inputs_json"}
    yield "Lab archive (zip)", set(Base.metadata.tables)


@pytest.mark.parametrize("section, fields", list(_format_fields()), ids=lambda v: v if isinstance(v, str) else "x")
def test_every_accepted_field_is_in_the_formats(section, fields):
    named = _code_words(FORMAT_SECTIONS[section] + "".join(
        body for name, body in _sections(FORMAT_SECTIONS[section], "### ").items()))
    missing = sorted(fields - named)
    assert not missing, f"docs/formats.md, section '{section}': fields not described: {missing}"


def _blocks(text: str, language: str) -> list[str]:
    return re.findall(rf"```{language}\n(.*?)```", text, flags=re.S)


def test_the_format_examples_are_accepted():
    from phantomlab.calibration.measurement_metadata import metadata_from_mapping
    from phantomlab.calibration.measurements import parse_measurement_text
    from phantomlab.materials import parse_shelf
    from phantomlab.recipe.recipe_file import parse_recipe
    from phantomlab.workflows import parse_amounts_csv

    shelf = parse_shelf(tomllib.loads(_blocks(FORMAT_SECTIONS["Stock file (TOML)"], "toml")[0]), base=RECIPES)
    assert {"water", "ps1000", "lipid20", "dye_ext660", "ink_black"} <= set(shelf.stocks)
    recipe = parse_recipe(tomllib.loads(_blocks(FORMAT_SECTIONS["Recipe file (TOML)"], "toml")[0]),
                          base_dir=RECIPES)
    assert recipe.stock_keys == ("lipid20", "ink_black", "dye_nir")
    kinds = _sections(FORMAT_SECTIONS["Measurement CSV"], "### ")
    for heading, body in kinds.items():
        kind = heading.split()[0]
        if kind in ("srdr", "sfdi", "slab", "optics"):
            examples = _blocks(body, "csv")
            assert examples, f"docs/formats.md: no example for the {kind} measurement CSV"
            for example in examples:
                parse_measurement_text(example, kind=kind, name=f"docs {kind} example")
        if kind == "fd":
            from phantomlab.calibration.fd_measurements import read_fd

            for example in _blocks(body, "csv"):
                read_fd(example, sidecar={"n": 1.4})
        if kind == "td":
            from phantomlab.calibration.td_measurements import irf_table, parse_irf_text, read_td

            data, irf = _blocks(body, "csv")
            times, counts, _ = parse_irf_text(irf, name="docs IRF example")
            read_td(data, sidecar={"n": 1.4, "irf": irf_table(times, counts)})
    sidecar = _blocks(FORMAT_SECTIONS["Measurement sidecar (TOML)"], "toml")[0]
    metadata_from_mapping(tomllib.loads(sidecar), where="docs sidecar example")
    assert parse_amounts_csv(_blocks(FORMAT_SECTIONS["Amounts CSV"], "csv")[0])[0]["stock"] == "lipid20"


# ---- links and pointers --------------------------------------------------------------------


@pytest.mark.parametrize("guide", ["README.md", "DEVELOPERS.md"])
def test_the_guides_link_to_the_three_documents(guide):
    text = _read(ROOT / guide)
    missing = [name for name in DOC_FILES if f"](docs/{name})" not in text]
    assert not missing, f"{guide} does not link to: {', '.join('docs/' + m for m in missing)}"


def _slug(heading: str) -> str:
    """The anchor a Markdown heading gets (GitHub's rule)."""
    text = heading.strip().lower().replace("`", "")
    return re.sub(r"[^\w\- ]", "", text).replace(" ", "-")


@pytest.mark.parametrize("document", ["README.md", "DEVELOPERS.md", *(f"docs/{n}" for n in DOC_FILES)])
def test_relative_links_resolve(document):
    path = ROOT / document
    broken = []
    for target in re.findall(r"\]\(([^)\s]+)\)", _read(path)):
        if re.match(r"[a-z]+:", target):
            continue  # http:, https:, mailto:
        file_part, _, anchor = target.partition("#")
        linked = (path.parent / file_part).resolve() if file_part else path
        if not linked.is_file():
            broken.append(target)
            continue
        if anchor:
            headings = re.findall(r"^#+ (.+)$", _read(linked), flags=re.M)
            if anchor not in {_slug(h) for h in headings}:
                broken.append(target)
    assert not broken, f"{document}: links that do not resolve: {broken}"


def test_nothing_points_at_a_design_file_outside_the_repository():
    name = "DESIGN" + ".md"  # spelt so that this file does not match itself
    if (ROOT / name).is_file():
        return
    skip = {".git", ".venv", "node_modules", "build", "demo-data", ".pytest_cache"}
    found = []
    for path in ROOT.rglob("*"):
        if any(part in skip or part.endswith(".egg-info") for part in path.relative_to(ROOT).parts):
            continue
        if path.is_file() and path.suffix in {".py", ".md", ".toml", ".txt", ".cfg", ".sh", ".yml", ".yaml"}:
            for number, line in enumerate(_read(path).splitlines(), start=1):
                if name in line:
                    found.append(f"{path.relative_to(ROOT)}:{number}")
    assert not found, f"references to {name}, which is not in the repository (use docs/): {found}"


def test_the_readme_commands_take_the_batch_id_they_are_given():
    """The walk-through uses the ID a command printed, never a hard-coded one."""
    readme = _read(ROOT / "README.md")
    hard_coded = []
    for block in _blocks(readme, "bash"):
        for line in block.splitlines():
            command = line.split("#", 1)[0]
            if "phantomlab" in command and re.search(r"\b20\d\d-\d{3}\b", command):
                hard_coded.append(line.strip())
    assert not hard_coded, f"README.md commands with a hard-coded batch ID: {hard_coded}"
