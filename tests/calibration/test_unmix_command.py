"""``phantomlab chromophore show`` and ``phantomlab unmix`` from the command line."""

from __future__ import annotations

import json
import math

import pytest

from phantomlab.cli import main


def _run(capsys, *argv):
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_chromophore_show_prints_the_printed_rows(capsys):
    status, out, _ = _run(capsys, "chromophore", "show", "hbo2", "--wavelength-nm", "414,800", "--json")
    payload = json.loads(out)
    assert status == 0
    # Gratzer & Kollias (Prahl 1999): HbO2 524280 at 414 nm, 816 at 800 nm, 1/(M cm) per mole of tetramer
    assert payload["epsilon_per_molar_per_cm"] == [524280.0, 816.0]
    assert payload["basis"].startswith("base 10") and "tetramer" in payload["basis"]
    assert "Gratzer" in payload["source"] and payload["warnings"] == []


@pytest.mark.parametrize(
    "argv, message",
    [
        (["chromophore", "show", "blood", "--wavelength-nm", "800"], "chromophore 'blood' unknown; known: hbo2, hb"),
        (["chromophore", "show", "hb", "--wavelength-nm", "800", "--source", "x"], "source 'x' unknown"),
        (["chromophore", "show", "hb", "--wavelength-nm", "1200"], "1200 nm outside the table's 250–1000 nm"),
        (["chromophore", "show", "hb", "--wavelength-nm", "400:1000:0.1"], "at most 2000"),
        (["chromophore"], "give an action: show"),
    ],
)
def test_chromophore_show_refusals(capsys, argv, message):
    status, out, err = _run(capsys, *argv)
    assert status == 2 and out == "" and message in err and err.count("\n") == 1


def _optics_file(path, *, so2=0.6, thb_um=30.0, sd=True):
    # A simple independent sum: Gratzer & Kollias rows (Prahl 1999) at 700, 760, 800, 850, 900 nm,
    # (nm, HbO2, Hb) in 1/(M cm), no water.
    rows = [(700, 290, 1794.28), (760, 586, 1548.52), (800, 816, 761.72), (850, 1058, 691.32), (900, 1198, 761.84)]
    lines = ["wavelength_nm,mua_per_mm,musp_per_mm" + (",mua_sd_per_mm,musp_sd_per_mm" if sd else "")]
    for w, e1, e2 in rows:
        mua = math.log(10) / 10 * 1e-6 * thb_um * (so2 * e1 + (1 - so2) * e2)
        lines.append(f"{w},{mua:.8g},1.0" + (f",{0.01 * mua:.4g},0.02" if sd else ""))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_unmix_an_optics_file_and_a_fit_json(tmp_path, capsys):
    optics = _optics_file(tmp_path / "optics.csv")
    status, out, _ = _run(capsys, "unmix", optics, "--chromophores", "hbo2,hb", "--json")
    direct = json.loads(out)
    assert status == 0
    assert direct["so2"] == pytest.approx(0.6, abs=1e-6) and direct["thb_um"] == pytest.approx(30.0, rel=1e-6)
    assert direct["chi2_red"] == pytest.approx(0.0, abs=1e-6) and direct["water_fraction"] is None
    status, out, _ = _run(capsys, "fit", optics, "--kind", "optics", "--json")
    (tmp_path / "fit.json").write_text(out, encoding="utf-8")
    status, out, _ = _run(capsys, "unmix", "--from-fit", tmp_path / "fit.json", "--chromophores", "hbo2,hb", "--json")
    from_fit = json.loads(out)
    assert status == 0 and from_fit["so2"] == pytest.approx(direct["so2"], abs=1e-9)
    status, out, _ = _run(capsys, "unmix", optics, "--chromophores", "hbo2,hb")
    assert "sO2                 0.600 ± 0.0" in out and "condition number" in out


def test_unmix_warns_on_isosbestic_wavelengths(tmp_path, capsys):
    # Gratzer & Kollias rows near the isosbestic points 500, 584 and 796 nm (Prahl 1999).
    path = tmp_path / "iso.csv"
    rows = [(500, 20932.8, 20862), (584, 34639.6, 34332.8), (796, 786.4, 802.96)]
    text = "wavelength_nm,mua_per_mm,musp_per_mm\n" + "".join(
        f"{w},{math.log(10) / 10 * 1e-6 * 20 * (0.5 * a + 0.5 * b):.8g},1\n" for w, a, b in rows)
    path.write_text(text, encoding="utf-8")
    status, out, _ = _run(capsys, "unmix", path, "--chromophores", "hbo2,hb", "--json")
    payload = json.loads(out)
    assert status == 0 and payload["condition_number"] > 30
    assert any("cannot separate" in w for w in payload["warnings"])


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--from-fit", "missing.json"], "give either OPTICS.csv or --from-fit"),
        (["--chromophores", "hbo2,water"], "give both hbo2 and hb"),
        (["--source", "nobody"], "source 'nobody' unknown"),
    ],
)
def test_unmix_refusals(tmp_path, capsys, extra, message):
    optics = _optics_file(tmp_path / "optics.csv")
    argv = ["unmix", optics, *extra]
    if "--chromophores" not in extra:
        argv += ["--chromophores", "hbo2,hb"]
    status, out, err = _run(capsys, *argv)
    assert status == 2 and out == "" and message in err


def test_unmix_from_a_missing_or_foreign_fit_file(tmp_path, capsys):
    status, _, err = _run(capsys, "unmix", "--from-fit", tmp_path / "none.json", "--chromophores", "hbo2,hb")
    assert status == 2 and "not found" in err
    (tmp_path / "x.json").write_text(json.dumps({"rho_mm": [1, 2]}), encoding="utf-8")
    status, _, err = _run(capsys, "unmix", "--from-fit", tmp_path / "x.json", "--chromophores", "hbo2,hb")
    assert status == 2 and "no wavelength_nm and mua_per_mm" in err
    status, out, err = _run(capsys, "unmix", "--chromophores", "hbo2,hb")
    assert status == 2 and out == "" and "give either OPTICS.csv or --from-fit" in err
