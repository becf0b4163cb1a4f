"""A generated corpus of bad input for the command line: recipes, stock files, measurement
files, sidecars, amounts files, baselines, lab archives and command-line arguments.

Every case is data: the files it needs (relative path -> content) and the arguments of one
``phantomlab`` command, run in-process through :func:`phantomlab.cli.main`.  Every bad file
carries :data:`SECRET` on a line of its own, so a refusal that quotes the file is caught.
``tests/hardening/test_bad_input_corpus.py`` runs them and holds each to the rules of bad
input (DEVELOPERS.md): one line, no traceback, no hang, no file content echoed, nothing
written.  Add a case by adding a row to the family's generator.
"""

from __future__ import annotations

import base64
import hashlib
import io
import json
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

REPO_ROOT = Path(__file__).resolve().parents[2]
RECIPES = REPO_ROOT / "recipes"

#: Planted in every bad file; it must never reach stdout or stderr.
SECRET = "PHANTOMLAB-SECRET-MARKER-7f3a9c"
#: A file that looks like a system file: the marker is its first line (what a reader that
#: quotes "the first line it could not parse" would print).
GARBAGE = f"{SECRET}:x:0:0:root:/root:/bin/bash\ndaemon:x:1:1:daemon:/usr/sbin:/usr/sbin/nologin\n"

#: Placeholders in argv, filled in by the runner.
WORK = "{work}"  # the case's folder
DB = "{db}"  # URL of a batch log holding one planned batch (BATCH)
NEW_DB = "{new_db}"  # URL of a database file that does not exist (and must not be created)
BATCH = "{batch}"  # the ID of that batch


@dataclass(frozen=True)
class Case:
    """One bad input: its family, a name, the files it writes and the command it runs."""

    family: str
    name: str
    argv: tuple[str, ...]
    files: dict = field(default_factory=dict)  # relative path -> str or bytes
    env: dict = field(default_factory=dict)  # environment variables for this case (limits)
    copy_recipes: bool = False  # a copy of the demo recipes folder under recipes/

    @property
    def id(self) -> str:
        return f"{self.family}:{self.name}"


def _toml_with_secret(text: str) -> str:
    return f"# {SECRET}\n{text}"


# ---- command-line arguments --------------------------------------------------------------------

BAD_LISTS = {
    "huge range": "1:1e12:1", "billion range": "1:1e9:1", "tiny step": "0:1:1e-300", "nan": "nan",
    "inf": "inf", "overflow": "1e999", "words": "abc", "empty": "", "two parts": "1:2", "reversed": "2:1:1",
    "zero step": "1:2:0", "negative step": "1:2:-1", "infinite stop": "1:inf:1", "powers": "9**9**9",
    "nan in list": "1,nan", "too many values": ",".join(["1"] * 10_001), "semicolons": "650;750",
}
FORWARD_BASE = {
    "srdr": ["--kind", "srdr", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4", "--rho-mm", "1:10:1"],
    "sfdi": ["--kind", "sfdi", "--mua-per-mm", "0.01", "--musp-per-mm", "1", "--n", "1.4", "--fx-per-mm", "0,0.1"],
    "mc": ["--kind", "mc", "--mua-per-mm", "0.01", "--mus-per-mm", "10", "--g", "0.9", "--n", "1.4",
           "--photons", "1000"],
    "slab": ["--kind", "slab", "--mua-per-mm", "0.1", "--mus-per-mm", "9", "--g", "0.75", "--n", "1.4",
             "--thickness-mm", "1"],
}


def _replace(argv: list[str], option: str, value: str) -> tuple[str, ...]:
    out = list(argv)
    if option in out:
        out[out.index(option) + 1] = value
    else:
        out += [option, value]
    return tuple(out)


def cli_argument_cases() -> list[Case]:
    cases: list[Case] = []
    for kind, option in (("srdr", "--mua-per-mm"), ("srdr", "--rho-mm"), ("srdr", "--musp-per-mm"),
                         ("sfdi", "--fx-per-mm"), ("mc", "--g"), ("slab", "--n")):
        for label, value in BAD_LISTS.items():
            cases.append(Case("cli", f"forward {kind} {option} {label}",
                              ("forward",) + _replace(FORWARD_BASE[kind], option, value)))
    for label, value in list(BAD_LISTS.items())[:9]:
        cases.append(Case("cli", f"stock optics --wavelength-nm {label}",
                          ("stock", "optics", str(RECIPES / "demo-stocks.toml"), "water", "--wavelength-nm", value)))
    mc = FORWARD_BASE["mc"]
    for option, value in [
        ("--photons", "0"), ("--photons", "-5"), ("--photons", "1e10"), ("--photons", "10000000000"),
        ("--photons", "99999999999999999999999"), ("--photons", "many"), ("--threads", "0"),
        ("--threads", "999"), ("--threads", "-1"), ("--seed", "-1"), ("--seed", "x"), ("--g", "1"), ("--g", "-1"),
        ("--g", "1.5"), ("--thickness-mm", "0"), ("--thickness-mm", "-1"), ("--thickness-mm", "nan"),
        ("--thickness-mm", "inf"), ("--n-outside", "0.5"), ("--n-outside", "nan"), ("--n", "0.5"),
        ("--mua-per-mm", "-1"), ("--mus-per-mm", "-1"), ("--model", "bogus"), ("--incidence", "diffuse"),
        ("--slide-mua-per-mm", "1"), ("--n-slide", "0.2"), ("--mua-per-mm", "1:20000:1"),
    ]:
        cases.append(Case("cli", f"forward mc {option} {value}", ("forward",) + _replace(mc, option, value)))
    cases.append(Case("cli", "forward mc entries x photons over the limit",
                      ("forward",) + _replace(_replace(mc, "--mua-per-mm", "0.01:0.1:0.01"), "--photons", "50000000")))
    cases.append(Case("cli", "forward mc without photons", ("forward", *mc[:-2])))
    srdr = FORWARD_BASE["srdr"]
    for label, argv in [
        ("entries x distances over the limit", _replace(_replace(srdr, "--mua-per-mm", "0.001:10:0.001"),
                                                        "--rho-mm", "0.01:30:0.01")),
        ("unequal lists", _replace(_replace(srdr, "--mua-per-mm", "0.01,0.02"), "--n", "1.3,1.4,1.5")),
        ("no distances", tuple(srdr[:-2])), ("unknown kind", _replace(srdr, "--kind", "tof")),
        ("unknown model", _replace(srdr, "--model", "bogus")), ("unknown boundary", _replace(srdr, "--boundary", "x")),
        ("both scatterings", _replace(srdr, "--mus-per-mm", "10")), ("negative rho", _replace(srdr, "--rho-mm", "1,-1")),
        ("negative mua", _replace(srdr, "--mua-per-mm", "-0.01")), ("index below 1", _replace(srdr, "--n", "0.9")),
        ("unknown option", tuple(srdr) + ("--colour", "red",)), ("no kind", ("--mua-per-mm", "0.01")),
    ]:
        cases.append(Case("cli", f"forward srdr {label}", ("forward",) + tuple(argv)))
    stocks = str(RECIPES / "demo-stocks.toml")
    for option, value in [("--temperature-c", "nan"), ("--temperature-c", "-300"), ("--temperature-c", "inf"),
                          ("--temperature-c", "1e9"), ("--temperature-c", "warm"), ("--potency", "0"),
                          ("--potency", "-1"), ("--potency", "nan"), ("--potency", "inf"), ("--potency", "1e309"),
                          ("--matrix", "nope")]:
        argv = ["stock", "optics", stocks, "ps1000", "--wavelength-nm", "600", "--matrix", "water"]
        cases.append(Case("cli", f"stock optics {option} {value}", _replace(argv, option, value)))
    for name, argv in [
        ("unknown stock", ("stock", "optics", stocks, "unobtainium", "--wavelength-nm", "600")),
        ("missing stock file", ("stock", "optics", f"{WORK}/none.toml", "water", "--wavelength-nm", "600")),
        ("folder as stock file", ("stock", "optics", WORK, "water", "--wavelength-nm", "600")),
        ("device as stock file", ("stock", "optics", "/dev/zero", "water", "--wavelength-nm", "600")),
        ("proc file as stock file", ("stock", "optics", "/proc/self/environ", "water", "--wavelength-nm", "600")),
        ("no action", ("stock",)),
        ("export without a log", ("stock", "export", stocks, f"{WORK}/out.toml", "--db", NEW_DB)),
        ("export over the stock file", ("stock", "export", stocks, stocks, "--db", DB)),
        ("export not toml", ("stock", "export", stocks, f"{WORK}/out.txt", "--db", DB)),
    ]:
        cases.append(Case("cli", f"stock {name}", argv))
    recipe = str(RECIPES / "demo-nir-liquid.toml")
    for option, value in [("--levels", "0"), ("--levels", "99"), ("--levels", "-1"), ("--levels", "x"),
                          ("--low", "nan"), ("--high", "inf"), ("--low", "-1"), ("--series-volume-ml", "nan"),
                          ("--series-volume-ml", "-1"), ("--series-mass-g", "inf")]:
        cases.append(Case("cli", f"plan --series {option} {value}", ("plan", recipe, "--series", "dye_nir", option, value)))
    for name, argv in [
        ("series of an unknown stock", ("plan", recipe, "--series", "unobtainium")),
        ("levels without series", ("plan", recipe, "--levels", "3")),
        ("sheet into a missing folder", ("plan", recipe, "--sheet", f"{WORK}/no/sheet.html")),
        ("csv into a missing folder", ("plan", recipe, "--csv", f"{WORK}/no/sheet.csv")),
        ("bad database url", ("plan", recipe, "--db", "mysql://x")),
        ("not a database url", ("plan", recipe, "--db", "::::")),
    ]:
        cases.append(Case("cli", f"plan {name}", argv))
    good = str(RECIPES / "measurements" / "demo-nir-liquid-srdr.csv")
    for option, value in [("--n", "nan"), ("--n", "0.5"), ("--n", "inf"), ("--n-outside", "nan"),
                          ("--model", "bogus"), ("--baseline", f"{WORK}/none.npz"), ("--kind", "tof")]:
        cases.append(Case("cli", f"fit {option} {value}", ("fit", good, "--kind", "srdr", option, value)))
    # the default (Monte Carlo lookup) takes its baseline from the cache: out-of-range g, a cache
    # folder that cannot be written (checked before a build), a damaged cached file
    for name, argv, files in [
        ("fit --g beyond the cache's range", ("fit", good, "--kind", "srdr", "--g", "0.97"), {}),
        ("fit --g nan", ("fit", good, "--kind", "srdr", "--g", "nan"), {}),
        ("fit baseline folder is a file", ("fit", good, "--kind", "srdr", "--g", "0.81", "--baseline-dir",
                                           f"{WORK}/afile"), {"afile": "not a folder"}),
        ("fit damaged cached baseline", ("fit", good, "--kind", "srdr", "--baseline-dir", f"{WORK}/cache"),
         {"cache/baseline-g0.58-n1.330-out1.000.npz": b"PK\x03\x04 damaged"}),  # one of the sidecar's g steps
    ]:
        cases.append(Case("cli", name, argv, files=files))
    for name, argv in [
        ("status bogus", ("batch", "status", BATCH, "finished", "--db", DB)),
        ("status backwards", ("batch", "status", BATCH, "planned", "--db", DB)),
        ("show bad id", ("batch", "show", "yesterday", "--db", DB)),
        ("show unknown id", ("batch", "show", "1999-999", "--db", DB)),
        ("show without a log", ("batch", "show", "2026-001", "--db", NEW_DB)),
        ("list bad status", ("batch", "list", "--status", "done", "--db", NEW_DB)),
        ("record into a missing folder", ("batch", "record", BATCH, "--html", f"{WORK}/no/r.html", "--db", DB)),
        ("record not html", ("batch", "record", BATCH, "--html", f"{WORK}/r.pdf", "--db", DB)),
        ("export not zip", ("batch", "export", f"{WORK}/lab.tar", "--db", DB)),
        ("export into a missing folder", ("batch", "export", f"{WORK}/no/lab.zip", "--db", DB)),
        ("retract without reason", ("batch", "retract", BATCH, "--db", DB)),
        ("amend nothing", ("batch", "amend", BATCH, "--reason", "x", "--db", DB)),
        ("add sheet into a missing folder", ("batch", "add", recipe, "--sheet", f"{WORK}/no/s.html", "--db", NEW_DB)),
        ("add sheet not html", ("batch", "add", recipe, "--sheet", f"{WORK}/s.pdf", "--db", NEW_DB)),
        ("correct without a log", ("correct", "2026-001", "--db", NEW_DB)),
        ("correct unknown batch", ("correct", "1999-999", "--db", DB)),
        ("correct sheet into a missing folder", ("correct", BATCH, "--sheet", f"{WORK}/no/s.html", "--db", DB)),
        ("no command", ()), ("unknown command", ("brew",)), ("batch no action", ("batch",)), ("lab no action", ("lab",)),
    ]:
        cases.append(Case("cli", name, argv))
    amounts = "stock,volume_ml\nwater,480\nlipid20,20\nink_black,0.05\ndye_nir,0.05\n"
    for option, value in [("--mixed-on", "yesterday"), ("--mixed-on", "2026-13-01"), ("--mixed-on", "2026-02-30"),
                          ("--mixed-on", "1899-12-31"), ("--mixed-on", "9999-01-01"), ("--mixed-on", ""),
                          ("--mixed-on", "2026-03-01x"), ("--mixed-on", "2026-03-01T25:00"),
                          ("--mixed-on", "2026-03-01T14:99"), ("--mixed-on", "2026-03-01 noon"),
                          ("--mixing-temperature-c", "nan"), ("--mixing-temperature-c", "-300"),
                          ("--mixing-temperature-c", "inf"), ("--mixing-temperature-c", "1e6")]:
        cases.append(Case("cli", f"batch actual {option} {value!r}",
                          ("batch", "actual", BATCH, f"{WORK}/amounts.csv", option, value, "--db", DB),
                          files={"amounts.csv": amounts}))
    for option, value in [("--temperature-c", "nan"), ("--temperature-c", "-274"), ("--age-days", "-1"),
                          ("--age-days", "nan"), ("--age-days", "inf"), ("--measured-on", "soon"),
                          ("--measured-on", "3026-01-01"), ("--n", "nan"), ("--thickness-mm", "nan"),
                          ("--kind", "tof")]:
        cases.append(Case("cli", f"batch measure {option} {value}",
                          ("batch", "measure", BATCH, good, "--kind", "srdr", "--no-fit", option, value, "--db", DB)))
    for value in ("yesterday", "2026-02-30", "0001-01-01"):
        cases.append(Case("cli", f"batch amend --set-mixed-on {value}",
                          ("batch", "amend", BATCH, "--reason", "typo", "--set-mixed-on", value, "--db", DB)))
    for option, value in [("--photons", "10"), ("--photons", "1000000000000"), ("--photons", "100000000"),
                          ("--g", "1"), ("--n", "0.5"), ("--mua-ref-per-mm", "nan"), ("--threads", "999")]:
        argv = ["baseline", "build", f"{WORK}/b.npz", "--g", "0.8", "--n", "1.4", "--photons", "2000"]
        cases.append(Case("cli", f"baseline build {option} {value}", ("baseline",) + _replace(argv, option, value)[1:]))
    cases.append(Case("cli", "baseline build into a missing folder",
                      ("baseline", "build", f"{WORK}/no/b.npz", "--g", "0.8", "--n", "1.4")))
    cases.append(Case("cli", "baseline build not npz", ("baseline", "build", f"{WORK}/b.txt", "--g", "0.8", "--n", "1.4")))
    optics = "wavelength_nm,mua_per_mm,musp_per_mm\n" + "".join(
        f"{w},{0.01 + 1e-5 * (w - 700)},1.0\n" for w in range(650, 960, 10))
    oximeter = str(RECIPES / "demo-oximeter-blood.toml")
    many = ",".join(["hbo2", "hb", "water", "lipid", "methb", "cohb"] + [f"s{i}" for i in range(8)])
    for name, chromophores, extra in [
        ("a recipe stock that is not an absorber", "hbo2,hb,water,lipid20", ("--recipe", oximeter)),
        ("the blood stock as a chromophore", "hbo2,hb,water,blood_kb1", ("--recipe", oximeter)),
        ("an unknown chromophore", "hbo2,hb,bilirubin", ()),
        ("a stock key without a recipe", "hbo2,hb,ink_black", ()),
        ("methb from a table without it", "hbo2,hb,methb", ("--source", "moaveni")),
        ("too many chromophores", many, ()),
        ("a missing recipe", "hbo2,hb,water", ("--recipe", f"{WORK}/none.toml")),
        ("a device as recipe", "hbo2,hb,water", ("--recipe", "/dev/zero")),
    ]:
        cases.append(Case("cli", f"unmix {name}", ("unmix", f"{WORK}/optics.csv", "--chromophores", chromophores, *extra),
                          files={"optics.csv": optics}))
    return cases


# ---- recipe files -----------------------------------------------------------------------------------

DEMO_RECIPE = (RECIPES / "demo-nir-liquid.toml").read_text(encoding="utf-8")


def _recipe_variant(old: str, new: str) -> str:
    assert old in DEMO_RECIPE, old
    return _toml_with_secret(DEMO_RECIPE.replace(old, new, 1))


_TARGET_LINES = ("wavelength_nm = [660, 700, 750, 800, 850]\nmua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]\n"
                 "musp_power_law = { a_per_mm = 1.0, b = 1.2, reference_nm = 750 }")

RECIPE_MUTATIONS = {
    "volume nan": ("batch_volume_ml = 500", "batch_volume_ml = nan"),
    "volume inf": ("batch_volume_ml = 500", "batch_volume_ml = inf"),
    "volume negative": ("batch_volume_ml = 500", "batch_volume_ml = -1"),
    "volume zero": ("batch_volume_ml = 500", "batch_volume_ml = 0"),
    "volume text": ("batch_volume_ml = 500", 'batch_volume_ml = "500 mL"'),
    "volume and mass": ("batch_volume_ml = 500", "batch_volume_ml = 500\nbatch_mass_g = 500"),
    "no volume": ("batch_volume_ml = 500\n", ""),
    "tolerance inf": ("mua_tolerance_percent = 5", "mua_tolerance_percent = inf"),
    "tolerance nan": ("mua_tolerance_percent = 5", "mua_tolerance_percent = nan"),
    "tolerance zero": ("musp_tolerance_percent = 3", "musp_tolerance_percent = 0"),
    "tolerance text": ("musp_tolerance_percent = 3", 'musp_tolerance_percent = "3 %"'),
    "target powers": ("mua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]",
                      'mua_per_mm = ["9**9**9 /mm", "0.01 /mm", "0.01 /mm", "0.01 /mm", "0.01 /mm"]'),
    "target overflow": ("mua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]",
                        'mua_per_mm = ["1e999 /mm", "0.01 /mm", "0.01 /mm", "0.01 /mm", "0.01 /mm"]'),
    "target nan": ("mua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]", "mua_per_mm = [nan, 0.01, 0.01, 0.01, 0.01]"),
    "target negative": ("mua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]",
                        "mua_per_mm = [-0.01, 0.01, 0.01, 0.01, 0.01]"),
    "target length": ("mua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]", "mua_per_mm = [0.01]"),
    "wavelength inf": ("wavelength_nm = [660, 700, 750, 800, 850]", "wavelength_nm = [660, 700, 750, 800, inf]"),
    "wavelength repeated": ("wavelength_nm = [660, 700, 750, 800, 850]", "wavelength_nm = [660, 660, 750, 800, 850]"),
    "power law b huge": ("b = 1.2", "b = 1e6"),
    "power law a inf": ("a_per_mm = 1.0", "a_per_mm = inf"),
    "power law unknown field": ("b = 1.2", "c = 1.2"),
    "limits nan": ("min_dispense_ul = 20", "min_dispense_ul = nan"),
    "limits inf": ("dead_volume_ml = 0.1", "dead_volume_ml = inf"),
    "limits steps fraction": ("max_dilution_steps = 3", "max_dilution_steps = 2.5"),
    "limits unknown": ("dead_volume_ml = 0.1", "dead_volume_litres = 0.1"),
    "preparation unknown kind": ('kind = "liquid"', 'kind = "soup"'),
    "unknown field": ('version = "1"', 'version = "1"\ncolour = "red"'),
    "stocks not a list": ('stocks = ["lipid20", "ink_black", "dye_nir"]', 'stocks = "lipid20"'),
    "stock twice": ('stocks = ["lipid20", "ink_black", "dye_nir"]', 'stocks = ["lipid20", "lipid20"]'),
    "unknown stock": ('stocks = ["lipid20", "ink_black", "dye_nir"]', 'stocks = ["unobtainium"]'),
    "matrix not a matrix": ('matrix = "water"', 'matrix = "lipid20"'),
    "stocks file missing": ('stocks_file = "demo-stocks.toml"', 'stocks_file = "none.toml"'),
    "stocks file a system file": ('stocks_file = "demo-stocks.toml"', 'stocks_file = "/etc/passwd"'),
    "stocks file a device": ('stocks_file = "demo-stocks.toml"', 'stocks_file = "/dev/zero"'),
    "stocks file garbage": ('stocks_file = "demo-stocks.toml"', 'stocks_file = "garbage.txt"'),
    "stocks file above the folder": ('stocks_file = "demo-stocks.toml"', 'stocks_file = "../outside-stocks.toml"'),
    "stocks file not text": ('stocks_file = "demo-stocks.toml"', 'stocks_file = 12'),
    "spectrum outside the folder": (_TARGET_LINES, 'spectrum_csv = "/etc/passwd"'),
    "spectrum above the folder": (_TARGET_LINES, 'spectrum_csv = "../outside.csv"'),
    "spectrum a proc file": (_TARGET_LINES, 'spectrum_csv = "/proc/self/environ"'),
    "spectrum garbage": (_TARGET_LINES, 'spectrum_csv = "garbage.txt"'),
    "spectrum secret column": (_TARGET_LINES, 'spectrum_csv = "secret-column.csv"'),
    "spectrum secret cell": (_TARGET_LINES, 'spectrum_csv = "secret-cell.csv"'),
}

RECIPE_FILES = {
    "broken toml": f"name = \"x\nstocks = [\n{SECRET} = = =\n",
    "secret on the broken line": f"{SECRET} is not toml\n",
    "bom and broken": "\ufeff" + f"[target\n{SECRET}\n",
    "not utf-8": (f"# {SECRET}\n").encode() + b"name = \"\xff\xfe\"\n",
    "nul bytes": (f"# {SECRET}\n").encode() + b"name = \"a\x00b\"\n",
    "binary": b"\x89PNG\r\n\x1a\n" + SECRET.encode() + bytes(range(256)),
    "empty": "",
    "garbage system file": GARBAGE,
    "deeply nested": "a = " + "[" * 5000 + "]" * 5000 + f"\n# {SECRET}\n",
}


def recipe_cases() -> list[Case]:
    cases = []
    support = {"recipes/garbage.txt": GARBAGE,
               "recipes/secret-column.csv": f"wavelength_nm,mua_per_mm,{SECRET}\n660,0.01,1\n700,0.01,1\n",
               "recipes/secret-cell.csv": f"wavelength_nm,mua_per_mm\n660,{SECRET}\n700,0.01\n",
               "outside.csv": f"# {SECRET}\nwavelength_nm,mua_per_mm\n660,0.01\n700,0.01\n",
               "outside-stocks.toml": f"# {SECRET}\n[water]\nkind = \"matrix\"\n"}
    for name, (old, new) in RECIPE_MUTATIONS.items():
        files = dict(support, **{"recipes/case.toml": _recipe_variant(old, new)})
        cases.append(Case("recipe", f"plan: {name}", ("plan", f"{WORK}/recipes/case.toml"), files=files,
                          copy_recipes=True))
    for name, content in RECIPE_FILES.items():
        cases.append(Case("recipe", f"plan: {name}", ("plan", f"{WORK}/recipes/case.toml"),
                          files={"recipes/case.toml": content}, copy_recipes=True))
    for name in ("volume nan", "tolerance inf", "spectrum outside the folder", "stocks file garbage"):
        old, new = RECIPE_MUTATIONS[name]
        files = dict(support, **{"recipes/case.toml": _recipe_variant(old, new)})
        cases.append(Case("recipe", f"batch add: {name}", ("batch", "add", f"{WORK}/recipes/case.toml",
                                                           "--sheet", f"{WORK}/sheet.html", "--db", NEW_DB),
                          files=files, copy_recipes=True))
    big = f"# {SECRET}\n" + "# padding\n" * 120_000  # 1.2 MB, over a limit lowered to 1 MB
    cases.append(Case("recipe", "plan: file over the size limit", ("plan", f"{WORK}/recipes/case.toml"),
                      files={"recipes/case.toml": big}, env={"PHANTOMLAB_MAX_FILE_MB": "1"}, copy_recipes=True))
    return cases


# ---- stock files ---------------------------------------------------------------------------------------

DEMO_STOCKS = (RECIPES / "demo-stocks.toml").read_text(encoding="utf-8")

STOCK_MUTATIONS = {
    "potency nan": ("ps1000", "potency = 1.0", "potency = nan"),
    "potency inf": ("ps1000", "potency = 1.0", "potency = inf"),
    "potency negative": ("ps1000", "potency = 1.0", "potency = -1.0"),
    "potency text": ("ps1000", "potency = 1.0", 'potency = "high"'),
    "diameter nan": ("ps1000", "diameter_um = 1.0", "diameter_um = nan"),
    "diameter inf": ("ps1000", "diameter_um = 1.0", "diameter_um = inf"),
    "diameter zero": ("ps1000", "diameter_um = 1.0", "diameter_um = 0"),
    "size cv negative": ("ps1000", "size_cv = 0.03", "size_cv = -0.03"),
    "density nan": ("ps1000", "particle_density_g_per_ml = 1.05", "particle_density_g_per_ml = nan"),
    "unknown material": ("ps1000", 'material = "polystyrene"', 'material = "kryptonite"'),
    "unknown kind": ("ps1000", 'kind = "spheres"', 'kind = "plasma"'),
    "unknown field": ("ps1000", "size_cv = 0.03", "size_cv = 0.03\ncolour = 1"),
    "bad expiry": ("ps1000", "expiry = 2031-09-01", 'expiry = "soon"'),
    "impossible expiry": ("ps1000", "expiry = 2031-09-01", 'expiry = "2031-02-30"'),
    "spectrum outside the folder": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "/etc/passwd"'),
    "spectrum above the folder": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"',
                                  'spectrum_csv = "../outside.csv"'),
    "spectrum proc file": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"',
                           'spectrum_csv = "/proc/self/environ"'),
    "spectrum a folder": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "spectra"'),
    "spectrum garbage": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "garbage.txt"'),
    "spectrum secret column": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "secret-column.csv"'),
    "spectrum secret cell": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "secret-cell.csv"'),
    "spectrum nan cell": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "nan-cell.csv"'),
    "spectrum binary": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "binary.csv"'),
    "spectrum symlink out": ("dye_nir", 'spectrum_csv = "spectra/dye_nir.csv"', 'spectrum_csv = "link.csv"'),
    "cuvette outside": ("ink_black", 'cuvette_csv = "spectra/ink_black-cuvette.csv"', 'cuvette_csv = "/etc/hostname"'),
    "extinction garbage": ("dye_ext660", 'extinction_csv = "spectra/dye_ext660-extinction.csv"',
                           'extinction_csv = "garbage.txt"'),
}


def _stock_variant(key: str, old: str, new: str) -> str:
    start = DEMO_STOCKS.index(f"[stocks.{key}]")
    end = DEMO_STOCKS.find("\n[", start + 1)
    end = len(DEMO_STOCKS) if end < 0 else end
    block = DEMO_STOCKS[start:end]
    assert old in block, (key, old)
    return _toml_with_secret(DEMO_STOCKS[:start] + block.replace(old, new, 1) + DEMO_STOCKS[end:])


def stock_cases() -> list[Case]:
    support = {"recipes/garbage.txt": GARBAGE,
               "recipes/secret-column.csv": f"wavelength_nm,{SECRET}\n660,0.01\n700,0.01\n",
               "recipes/secret-cell.csv": f"wavelength_nm,mua_per_mm\n660,{SECRET}\n700,0.01\n",
               "recipes/nan-cell.csv": f"# {SECRET}\nwavelength_nm,mua_per_mm\n660,nan\n700,0.01\n",
               "recipes/binary.csv": b"\xff\xd8\xff" + SECRET.encode() + bytes(range(256)),
               "outside.csv": f"# {SECRET}\nwavelength_nm,mua_per_mm\n660,0.01\n700,0.01\n",
               "recipes/link.csv": "->/etc/passwd"}  # the runner makes this a symbolic link
    cases = []
    for name, (key, old, new) in STOCK_MUTATIONS.items():
        files = dict(support, **{"recipes/case-stocks.toml": _stock_variant(key, old, new)})
        cases.append(Case("stock", name, ("stock", "optics", f"{WORK}/recipes/case-stocks.toml", key,
                                          "--wavelength-nm", "660,700"), files=files, copy_recipes=True))
    for name, content in RECIPE_FILES.items():
        cases.append(Case("stock", f"file: {name}", ("stock", "optics", f"{WORK}/recipes/case-stocks.toml", "water",
                                                     "--wavelength-nm", "660"),
                          files={"recipes/case-stocks.toml": content}, copy_recipes=True))
    # a recipe whose stock file is bad fails the same way
    files = dict(support, **{"recipes/demo-stocks.toml": _stock_variant(*STOCK_MUTATIONS["spectrum outside the folder"])})
    cases.append(Case("stock", "recipe over a stock file reading outside", ("plan", f"{WORK}/recipes/demo-nir-liquid.toml"),
                      files=files, copy_recipes=True))
    return cases


# ---- measurement files and their sidecars -------------------------------------------------------------------

GOOD_MEASUREMENT = {
    "srdr": "wavelength_nm,rho_mm,reflectance_per_mm2\n660,2,0.0107\n660,3,0.0048\n660,4,0.0024\n",
    "sfdi": "wavelength_nm,fx_per_mm,reflectance\n660,0,0.5\n660,0.1,0.3\n660,0.2,0.2\n",
    "slab": "wavelength_nm,total_reflectance,total_transmittance\n660,0.3,0.4\n700,0.31,0.41\n",
    "optics": "wavelength_nm,mua_per_mm,musp_per_mm\n660,0.01,1.0\n700,0.011,0.9\n",
}
FIT_OPTIONS = {"srdr": ("--n", "1.4"), "sfdi": ("--n", "1.4"), "slab": ("--n", "1.4", "--thickness-mm", "2", "--g", "0.8"),
               "optics": ()}


def _bad_measurements(kind: str) -> dict[str, str | bytes]:
    good = GOOD_MEASUREMENT[kind]
    header, first, *rest = good.splitlines()
    columns = header.split(",")
    return {
        "system file": GARBAGE,
        "secret header column": f"{header},{SECRET}\n{first},1\n",
        "secret first column": f"{SECRET},{','.join(columns[1:])}\n{first}\n",
        "secret cell": f"{header}\n{first.rsplit(',', 1)[0]},{SECRET}\n",
        "secret after the header": f"{header}\n{SECRET}\n{first}\n",
        "nan cell": f"# {SECRET}\n{header}\n{first.rsplit(',', 1)[0]},nan\n",
        "inf cell": f"# {SECRET}\n{header}\n{first.rsplit(',', 1)[0]},inf\n",
        "negative value": f"# {SECRET}\n{header}\n{first.rsplit(',', 1)[0]},-1\n",
        "wavelength in um": f"# {SECRET}\n{header}\n0.66,{first.split(',', 1)[1]}\n",
        "wrong unit column": f"# {SECRET}\n{header.replace('wavelength_nm', 'wavelength_um')}\n{first}\n",
        "short row": f"# {SECRET}\n{header}\n{first.rsplit(',', 1)[0]}\n",
        "only comments": f"# {SECRET}\n# nothing else\n",
        "header only": f"# {SECRET}\n{header}\n",
        "empty": "",
        "repeated column": f"# {SECRET}\n{header},{columns[-1]}\n{first},1\n",
        "binary": b"\x00\x01\x02" + SECRET.encode() + bytes(range(256)),
        "latin-1": (f"# {SECRET} caf\xe9\n{header}\n{first}\n").encode("latin-1"),
        "bom and garbage": "\ufeff" + GARBAGE,
        "a server path": str(REPO_ROOT / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv") + f"\n# {SECRET}\n",
        "quoted newline cell": f'# {SECRET}\n{header}\n"{first}\n",1\n',
    }


SIDECARS = {
    "broken toml": f"n = 1.4\n{SECRET} = = \n",
    "n nan": f"# {SECRET}\nn = nan\n",
    "n inf": f"# {SECRET}\nn = inf\n",
    "n too low": f"# {SECRET}\nn = 0.5\n",
    "g out of range": f"# {SECRET}\nn = 1.4\ng = 2\n",
    "thickness powers": f'# {SECRET}\nn = 1.4\nthickness_mm = "9**9**9 mm"\n',
    "thickness nan": f"# {SECRET}\nn = 1.4\nthickness_mm = nan\n",
    "thickness negative": f'# {SECRET}\nn = 1.4\nthickness_mm = "-2 mm"\n',
    "date not a date": f'# {SECRET}\nn = 1.4\ndate = "last tuesday"\n',
    "date impossible": f'# {SECRET}\nn = 1.4\ndate = "2026-02-30"\n',
    "date in the future": f"# {SECRET}\nn = 1.4\ndate = 3026-01-01\n",
    "date a number": f"# {SECRET}\nn = 1.4\ndate = 5\n",
    "slides unknown": f'# {SECRET}\nn = 1.4\nslides = "left"\n',
    "reference outside": f'# {SECRET}\nn = 1.4\n[reference]\nmua_per_mm = 0.01\nmusp_per_mm = 1.0\nreading_csv = "/etc/passwd"\n',
    "reference above": f'# {SECRET}\nn = 1.4\n[reference]\nmua_per_mm = 0.01\nmusp_per_mm = 1.0\nreading_csv = "../outside.csv"\n',
    "reference garbage": f'# {SECRET}\nn = 1.4\n[reference]\nmua_per_mm = 0.01\nmusp_per_mm = 1.0\nreading_csv = "garbage.txt"\n',
    "reference not a table": f'# {SECRET}\nn = 1.4\nreference = "ref.csv"\n',
    "reference nan optics": f'# {SECRET}\nn = 1.4\n[reference]\nmua_per_mm = nan\nmusp_per_mm = 1.0\n',
    "binary": b"\xff\xfe" + SECRET.encode() + bytes(range(256)),
    "bom and broken": "\ufeff" + f"n = \n{SECRET}\n",
}


def measurement_cases() -> list[Case]:
    cases = []
    for kind in GOOD_MEASUREMENT:
        for name, content in _bad_measurements(kind).items():
            cases.append(Case("measurement", f"fit {kind}: {name}",
                              ("fit", f"{WORK}/m.csv", "--kind", kind, *FIT_OPTIONS[kind]), files={"m.csv": content}))
    for name in ("system file", "secret cell", "binary", "a server path"):
        cases.append(Case("measurement", f"batch measure: {name}",
                          ("batch", "measure", BATCH, f"{WORK}/m.csv", "--kind", "srdr", "--n", "1.4", "--db", DB),
                          files={"m.csv": _bad_measurements("srdr")[name]}))
    big = f"# {SECRET}\n" + GOOD_MEASUREMENT["optics"] * 70_000  # ~1.7 MB
    cases.append(Case("measurement", "fit: file over the size limit", ("fit", f"{WORK}/m.csv", "--kind", "optics"),
                      files={"m.csv": big}, env={"PHANTOMLAB_MAX_FILE_MB": "1"}))
    cases.append(Case("measurement", "fit: a device", ("fit", "/dev/zero", "--kind", "optics")))
    cases.append(Case("measurement", "fit: a pipe", ("fit", f"{WORK}/pipe.csv", "--kind", "optics"),
                      files={"pipe.csv": "|fifo"}))  # the runner makes this a named pipe: reading would hang
    return cases


def sidecar_cases() -> list[Case]:
    cases = []
    for name, content in SIDECARS.items():
        files = {"m.csv": GOOD_MEASUREMENT["srdr"], "m.toml": content, "outside.csv": f"# {SECRET}\n",
                 "garbage.txt": GARBAGE}
        cases.append(Case("sidecar", f"fit: {name}", ("fit", f"{WORK}/m.csv", "--kind", "srdr"), files=files))
    for name in ("broken toml", "reference outside", "date not a date"):
        files = {"m.csv": GOOD_MEASUREMENT["srdr"], "m.toml": SIDECARS[name]}
        cases.append(Case("sidecar", f"batch measure: {name}",
                          ("batch", "measure", BATCH, f"{WORK}/m.csv", "--kind", "srdr", "--db", DB), files=files))
    return cases


# ---- amounts files -------------------------------------------------------------------------------------------

AMOUNTS = {
    "system file": GARBAGE,
    "secret header": f"stock,{SECRET}\nwater,480\n",
    "secret cell": f"stock,volume_ml\nwater,{SECRET}\n",
    "negative": f"# {SECRET}\nstock,volume_ml\nwater,-1\n",
    "nan": f"# {SECRET}\nstock,volume_ml\nwater,nan\n",
    "inf": f"# {SECRET}\nstock,volume_ml\nwater,inf\n",
    "sum overflows": f"# {SECRET}\nstock,volume_ml\nwater,1e308\nlipid20,1e308\nink_black,1\ndye_nir,1\n",
    "unknown stock": f"# {SECRET}\nstock,volume_ml\nwater,480\nunobtainium,1\n",
    "stock twice": f"# {SECRET}\nstock,volume_ml\nwater,480\nwater,1\n",
    "both amounts": f"# {SECRET}\nstock,volume_ml,mass_g\nwater,480,480\n",
    "dilution below 1": f"# {SECRET}\nstock,volume_ml,dilution_factor\nwater,480,0.5\n",
    "dilution nan": f"# {SECRET}\nstock,volume_ml,dilution_factor\nwater,480,nan\n",
    "missing stock": f"# {SECRET}\nstock,volume_ml\nwater,480\n",
    "diluent on a stock row": f"# {SECRET}\nstock,volume_ml,diluent_ml\nwater,480,\nlipid20,20,1\nink_black,0.05,\n"
                              "dye_nir,0.05,\n",
    "pre-dilution without its diluent": f"# {SECRET}\nstock,volume_ml,diluent_ml\nwater,480,\nink_black-D1,0.1,\n"
                                        "lipid20,20,\nink_black,0.05,\ndye_nir,0.05,\n",
    "pre-dilution taken 0": f"# {SECRET}\nstock,volume_ml,diluent_ml\nwater,480,\nink_black-D1,0,0.9\n"
                            "lipid20,20,\nink_black,0.05,\ndye_nir,0.05,\n",
    "pre-dilution diluent nan": f"# {SECRET}\nstock,volume_ml,diluent_ml\nink_black-D1,0.1,nan\n",
    "pre-dilution by mass, made by volume": f"# {SECRET}\nstock,mass_g,diluent_g\nink_black-D1,0.1,0.9\n",
    "pre-dilution without its dose": f"# {SECRET}\nstock,volume_ml,diluent_ml\nink_black-D1,0.1,0.9\n"
                                     "lipid20,20,\ndye_nir,0.05,\n",
    "pre-diluted dose weighed": f"# {SECRET}\nstock,volume_ml,mass_g,diluent_ml\nink_black-D1,0.1,,0.9\n"
                                "ink_black,,0.05,\nlipid20,20,,\ndye_nir,0.05,,\n",
    "both diluent columns": f"# {SECRET}\nstock,volume_ml,diluent_ml,diluent_g\nink_black-D1,0.1,0.9,0.9\n",
    "matrix line of a one-line matrix": f"# {SECRET}\nstock,volume_ml\nwater:part_a,480\nlipid20,20\n"
                                        "ink_black,0.05\ndye_nir,0.05\n",
    "empty": "",
    "binary": b"\x00" + SECRET.encode() + bytes(range(256)),
    "bom and garbage": "\ufeff" + GARBAGE,
}


def amounts_cases() -> list[Case]:
    return [Case("amounts", name, ("batch", "actual", BATCH, f"{WORK}/a.csv", "--db", DB), files={"a.csv": content})
            for name, content in AMOUNTS.items()]


# ---- baselines ---------------------------------------------------------------------------------------------

def _npz(**arrays) -> bytes:
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    return buffer.getvalue()


def _npy() -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, np.arange(3))
    return buffer.getvalue()


def _zip(members: dict[str, bytes]) -> bytes:
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for name, data in members.items():
            archive.writestr(name, data)
    return buffer.getvalue()


BASELINES = {
    "text": GARBAGE,
    "bare npy": _npy() + SECRET.encode(),
    "zip header then garbage": b"PK\x03\x04" + SECRET.encode() * 10,
    "zip of junk": _zip({"inputs_json.npy": SECRET.encode()}),
    "missing arrays": _npz(inputs_json=np.array(json.dumps({"format": SECRET}))),
    "wrong format tag": _npz(inputs_json=np.array(json.dumps({"format": SECRET})),
                             exit_radius_mm=np.zeros(2, np.float32), path_length_mm=np.zeros(2, np.float32),
                             scatterings=np.zeros(2, np.uint16)),
    "object array": _npz(inputs_json=np.array([{"a": SECRET}], dtype=object)),
    "empty": b"",
}


def baseline_cases() -> list[Case]:
    cases = []
    for name, content in BASELINES.items():
        cases.append(Case("baseline", f"show: {name}", ("baseline", "show", f"{WORK}/b.npz"), files={"b.npz": content}))
        cases.append(Case("baseline", f"fit with: {name}",
                          ("fit", str(RECIPES / "measurements" / "demo-nir-liquid-srdr.csv"), "--kind", "srdr",
                           "--model", "mc", "--baseline", f"{WORK}/b.npz"), files={"b.npz": content}))
    bomb = _zip({"exit_radius_mm.npy": b"\x00" * 3_000_000})  # 3 MB of zeros in a few kB
    cases.append(Case("baseline", "show: unpacks past the limit", ("baseline", "show", f"{WORK}/b.npz"),
                      files={"b.npz": bomb}, env={"PHANTOMLAB_MAX_BASELINE_FILE_MB": "1"}))
    return cases


# ---- lab archives ---------------------------------------------------------------------------------------------

def _declare_size(archive: bytes, member: str, size: int) -> bytes:
    """The archive with ``member`` declaring ``size`` unpacked bytes (what a zip bomb declares)."""
    data = bytearray(archive)
    name = member.encode()
    for signature, offset in ((b"PK\x03\x04", 22), (b"PK\x01\x02", 24)):
        start = 0
        while (start := data.find(signature, start)) >= 0:
            name_at = start + (30 if signature == b"PK\x03\x04" else 46)
            if data[name_at:name_at + len(name)] == name:
                data[start + offset:start + offset + 4] = size.to_bytes(4, "little")
            start += 4
    return bytes(data)


def archive_cases(good_archive: bytes) -> list[Case]:
    """Damaged copies of a real archive (exported by the runner from its batch log)."""
    with zipfile.ZipFile(io.BytesIO(good_archive)) as archive:
        members = {name: archive.read(name) for name in archive.namelist()}
    manifest = json.loads(members["manifest.json"])

    def variant(change: Callable[[dict, dict], None]) -> bytes:
        copied = dict(members)
        meta = json.loads(json.dumps(manifest))
        change(copied, meta)
        if copied.get("manifest.json") == members["manifest.json"]:  # not replaced by the change itself
            copied["manifest.json"] = json.dumps(meta).encode()
        return _zip(copied)

    def rows(table: str, edit: Callable[[list], None]) -> Callable[[dict, dict], None]:
        def change(copied, meta):
            data = json.loads(copied[f"tables/{table}.json"])
            edit(data)
            copied[f"tables/{table}.json"] = json.dumps(data).encode()
            meta["tables"][table] = len(data)
        return change

    def set_field(table, column, value):
        return rows(table, lambda data: data[0].__setitem__(column, value))

    def replace_member(name, data):
        return lambda copied, meta: copied.__setitem__(name, data)

    def manifest_key(key, value):
        return lambda copied, meta: meta.__setitem__(key, value)

    batches = json.loads(members["tables/batches.json"])
    damaged = {
        "no manifest": lambda copied, meta: copied.pop("manifest.json"),
        "manifest not json": replace_member("manifest.json", SECRET.encode()),
        "manifest a list": replace_member("manifest.json", json.dumps([SECRET]).encode()),
        "manifest too large": replace_member("manifest.json", b" " * 1_100_000 + json.dumps(manifest).encode()),
        "wrong format": manifest_key("format", SECRET),
        "wrong format version": manifest_key("format_version", 99),
        "older schema revision": manifest_key("schema_revision", "0001"),
        "unknown schema revision": manifest_key("schema_revision", SECRET),
        "tables not a mapping": manifest_key("tables", [SECRET]),
        "negative row count": lambda copied, meta: meta["tables"].__setitem__("batches", -1),
        "unknown table": lambda copied, meta: (meta["tables"].__setitem__(SECRET[:20], 0),
                                               copied.__setitem__(f"tables/{SECRET[:20]}.json", b"[]")),
        "missing table": lambda copied, meta: copied.pop("tables/batches.json"),
        "table not json": replace_member("tables/batches.json", SECRET.encode()),
        "table not a list": replace_member("tables/batches.json", json.dumps({"a": SECRET}).encode()),
        "row not an object": rows("batches", lambda data: data.__setitem__(0, SECRET)),
        "row count off": lambda copied, meta: meta["tables"].__setitem__("batches", len(batches) + 1),
        "unknown column": set_field("batches", SECRET[:30], 1),
        "missing column": rows("batches", lambda data: data[0].pop("code")),
        "id a string": set_field("batches", "id", SECRET),
        "id a boolean": set_field("batches", "id", True),
        "id too large": set_field("batches", "id", 2**70),
        "code a number": set_field("batches", "code", 5),
        "code too long": set_field("batches", "code", SECRET * 3),
        "date garbage": set_field("batches", "planned_on", SECRET),
        "datetime garbage": set_field("batches", "recorded_at", SECRET),
        "bool a string": set_field("batches", "retracted", SECRET),
        "required column empty": set_field("batches", "status", None),
        "repeated id": rows("batches", lambda data: data.append(dict(data[0]))),
        "reference to a missing row": set_field("batches", "plan_id", 999_999),
        "bytes not base64": set_field("measurements", "raw_content", {"base64": SECRET + "!!"}),
        "bytes not a mapping": set_field("measurements", "raw_content", SECRET),
        "bytes do not match their hash": set_field("measurements", "raw_content",
                                                    {"base64": base64.b64encode(SECRET.encode()).decode()}),
        "float a string": set_field("measurements", "phantom_age_days", SECRET),
    }
    cases = []
    for name, change in damaged.items():
        cases.append(Case("archive", name, ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                          files={"lab.zip": variant(change)}))
    cases.append(Case("archive", "not a zip", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": GARBAGE}))
    cases.append(Case("archive", "empty file", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": b""}))
    cases.append(Case("archive", "truncated", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": good_archive[: len(good_archive) // 2]}))
    cases.append(Case("archive", "a folder", ("lab", "import", WORK, "--db", NEW_DB)))
    cases.append(Case("archive", "a device", ("lab", "import", "/dev/zero", "--db", NEW_DB)))
    bomb = variant(replace_member("tables/fits.json", b"[" + b" " * 3_000_000 + b"]"))  # 3 MB that packs to kB
    cases.append(Case("archive", "tables unpack past the limit", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": bomb}, env={"PHANTOMLAB_MAX_ARCHIVE_MB": "1"}))
    cases.append(Case("archive", "tables declare 2.1 GB unpacked", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": _declare_size(variant(lambda copied, meta: None), "tables/fits.json",
                                                      2_100_000_000)}))
    cases.append(Case("archive", "archive past the limit", ("lab", "import", f"{WORK}/lab.zip", "--db", NEW_DB),
                      files={"lab.zip": good_archive + b"\0" * 1_100_000}, env={"PHANTOMLAB_MAX_ARCHIVE_MB": "1"}))
    cases.append(Case("archive", "into a log that holds data", ("lab", "import", f"{WORK}/lab.zip", "--db", DB),
                      files={"lab.zip": good_archive}))
    return cases


def all_cases(good_archive: bytes) -> list[Case]:
    return (cli_argument_cases() + recipe_cases() + stock_cases() + measurement_cases() + sidecar_cases()
            + amounts_cases() + baseline_cases() + archive_cases(good_archive))


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
