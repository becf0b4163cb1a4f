"""One canonical recipe hash: comments, spacing, key order and 500 vs 500.0 do not change it; the
page's route (a parsed definition) gives the file's hash; any change of content does."""

import hashlib
import json
import shutil
import tomllib
from pathlib import Path

from phantomlab.recipe import load_recipe
from phantomlab.recipe.recipe_file import parse_recipe
from phantomlab.recipe.recipe_hash import canonical_recipe_hash, canonical_recipe_text

RECIPES = Path(__file__).resolve().parents[2] / "recipes"


def _copy(tmp_path, text):
    shutil.copy(RECIPES / "demo-stocks.toml", tmp_path / "demo-stocks.toml")
    shutil.copytree(RECIPES / "spectra", tmp_path / "spectra")
    path = tmp_path / "r.toml"
    path.write_text(text)
    return path


def test_formatting_does_not_change_the_hash(tmp_path):
    original = (RECIPES / "demo-nir-liquid.toml").read_text()
    reference = load_recipe(RECIPES / "demo-nir-liquid.toml").content_hash
    reformatted = ("# another comment\n" + original.replace("batch_volume_ml = 500", "batch_volume_ml   =   500.0")
                   .replace("\n\n", "\n\n\n"))
    assert load_recipe(_copy(tmp_path, reformatted)).content_hash == reference


def test_the_page_route_gives_the_files_hash():
    path = RECIPES / "demo-nir-liquid.toml"
    definition = json.loads(json.dumps(tomllib.loads(path.read_text())))  # as the page keeps it
    rebuilt = parse_recipe(definition, base_dir=RECIPES)
    assert rebuilt.content_hash == load_recipe(path).content_hash


def test_content_changes_the_hash(tmp_path):
    original = (RECIPES / "demo-nir-liquid.toml").read_text()
    changed = original.replace("mua_tolerance_percent = 5", "mua_tolerance_percent = 4")
    assert load_recipe(_copy(tmp_path, changed)).content_hash != load_recipe(RECIPES / "demo-nir-liquid.toml").content_hash


def test_canonical_text_is_sorted_json_of_floats():
    text = canonical_recipe_text({"b": 1, "a": {"y": [2, 3.5], "x": True}})
    assert text == '{"a":{"x":true,"y":[2.0,3.5]},"b":1.0}'
    # SHA-256 of that text, then the files' bytes (hashlib as the independent reference)
    expected = hashlib.sha256(text.encode() + b"extra").hexdigest()
    assert canonical_recipe_hash({"b": 1, "a": {"y": [2, 3.5], "x": True}}, files=[b"extra"]) == expected
