"""The haemoglobin commands' printed keys are in docs/contract.md (as tests/docs/test_docs.py
checks for the other cheap commands)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np

from phantomlab.cli import main

ROOT = Path(__file__).resolve().parents[2]
CONTRACT = (ROOT / "docs" / "contract.md").read_text(encoding="utf-8")


def _section(title: str) -> str:
    match = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## )", CONTRACT, flags=re.S | re.M)
    assert match, f"docs/contract.md has no '## {title}' section"
    return match.group(1)


def _named(title: str) -> set[str]:
    spans = re.findall(r"```.*?```|`[^`\n]+`", _section(title) + _section("General rules"), flags=re.S)
    return {word for span in spans for word in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", span)}


def _run(capsys, *argv) -> dict:
    status = main([*map(str, argv), "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


def test_chromophore_show_keys(capsys):
    payload = _run(capsys, "chromophore", "show", "hb", "--wavelength-nm", "760,800", "--source", "moaveni")
    missing = sorted(set(payload) - _named("phantomlab chromophore show"))
    assert not missing, f"docs/contract.md, 'phantomlab chromophore show': keys not described: {missing}"


def test_unmix_keys(tmp_path, capsys):
    wavelength = np.arange(650, 1001, 25.0)
    mua = 0.002 + 0.0001 * np.arange(wavelength.size)
    optics = tmp_path / "optics.csv"
    optics.write_text("wavelength_nm,mua_per_mm,musp_per_mm\n"
                      + "".join(f"{w:g},{a:.6g},1.0\n" for w, a in zip(wavelength, mua)), encoding="utf-8")
    payload = _run(capsys, "unmix", optics, "--chromophores", "hbo2,hb,water")
    missing = sorted(set(payload) - _named("phantomlab unmix"))
    assert not missing, f"docs/contract.md, 'phantomlab unmix': keys not described: {missing}"


def _all_keys(value) -> set[str]:
    found: set[str] = set()
    if isinstance(value, dict):
        for key, item in value.items():
            found.add(key)
            found |= _all_keys(item)
    elif isinstance(value, list):
        for item in value:
            found |= _all_keys(item)
    return found


def test_oxygenation_keys(tmp_path, capsys):
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    code = _run(capsys, "batch", "add", ROOT / "recipes" / "demo-nir-liquid.toml", "--db", db)["batch_id"]
    measurements = ROOT / "recipes" / "measurements"
    added = _run(capsys, "oxygenation", "add", code, measurements / "demo-oximeter-series.csv", "--references",
                 measurements / "demo-oximeter-references.csv", "--chromophores", "hbo2,hb,water", "--db", db)
    shown = _run(capsys, "oxygenation", "show", code, "--db", db)
    add_names = _named("phantomlab oxygenation add")
    for title, payload, named in (("phantomlab oxygenation add", added, add_names),
                                  # show refers to the point, reading and comparison keys of add
                                  ("phantomlab oxygenation show", shown, _named("phantomlab oxygenation show") | add_names)):
        missing = sorted(_all_keys(payload) - named)
        assert not missing, f"docs/contract.md, '{title}': keys not described: {missing}"


def test_plan_keys_of_a_blood_recipe(capsys):
    payload = _run(capsys, "plan", ROOT / "recipes" / "demo-oximeter-blood.toml")
    named = _named("phantomlab plan") | {
        word for span in re.findall(r"`[^`\n]+`", CONTRACT[CONTRACT.index("## Shared objects"):CONTRACT.index("## phantomlab\n")])
        for word in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", span)}
    missing = sorted(_all_keys({k: v for k, v in payload.items() if k != "preparation"}) - named)
    assert not missing, f"docs/contract.md, the plan object: keys not described: {missing}"


def test_stock_optics_of_blood_keys(capsys):
    payload = _run(capsys, "stock", "optics", ROOT / "recipes" / "demo-stocks.toml", "blood_kb1",
                   "--wavelength-nm", "660,800", "--so2", "0.5")
    missing = sorted(set(payload) - _named("phantomlab stock optics"))
    assert not missing, f"docs/contract.md, 'phantomlab stock optics': keys not described: {missing}"
