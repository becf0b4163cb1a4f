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
