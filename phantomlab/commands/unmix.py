"""``phantomlab unmix``: μa(λ) → sO₂, total haemoglobin, water, lipid and a recipe's stocks (layer 5, no physics).

    phantomlab unmix [OPTICS.csv] --chromophores hbo2,hb,water[,lipid,methb,cohb,STOCK...]
                     [--recipe RECIPE.toml] [--from-fit FILE.json] [--source S] [--temperature-c T] [--json]

JSON keys (docs/contract.md): ``so2``, ``so2_sd``, ``thb_um``, ``thb_sd_um``, ``water_fraction``,
``lipid_fraction`` (when asked), ``chi2_red``, ``condition_number``, ``warnings``,
``stock_fractions`` and ``stock_fraction_sds`` (with ``--recipe``); extras:
``water_fraction_sd``, ``lipid_fraction_sd``, ``hbo2_um``, ``hbo2_sd_um``, ``hb_um``,
``hb_sd_um`` (and ``methb_…``, ``cohb_…`` when asked), ``chromophores``, ``source``,
``water_temperature_c``, ``basis``,
``dof``, ``independence``, ``wavelength_nm``, ``mua_per_mm``, ``model_mua_per_mm``,
``residuals``, ``covariance``, ``input``, ``recipe``.
"""

from __future__ import annotations

from pathlib import Path

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError

__all__ = ["register"]


def register(subparsers) -> None:
    from phantomlab.materials.haemoglobin import DEFAULT_HAEMOGLOBIN_SOURCE, HAEMOGLOBIN_SOURCES

    parser = subparsers.add_parser(
        "unmix",
        help="sO2, total haemoglobin, water, lipid and a recipe's stocks from a mua spectrum "
        "(non-negative least squares)",
        description="Unmix a mua spectrum (an optics file, or a fit's JSON output) into oxy- and "
        "deoxyhaemoglobin (and met-, carboxyhaemoglobin), water, lipid and the absorber stocks of a "
        "recipe with SDs; warns when the wavelengths cannot separate them.",
    )
    parser.add_argument("optics_file", nargs="?", default=None, metavar="OPTICS.csv",
                        help="mua spectrum in the optics layout (wavelength_nm,mua_per_mm,musp_per_mm[,...sd])")
    parser.add_argument("--chromophores", required=True, metavar="LIST",
                        help="hbo2,hb and any of methb, cohb, water, lipid and (with --recipe) the recipe's "
                        "absorber stocks by key, comma-separated; with --recipe and no stock named, every "
                        "absorber stock of the recipe is added")
    parser.add_argument("--recipe", default=None, metavar="RECIPE.toml",
                        help="unmix the recipe's absorber stocks too (volume fractions of the undiluted "
                        "stock, stock_fractions) and report its blood stock's fraction from the total haemoglobin")
    parser.add_argument("--from-fit", default=None, metavar="FILE.json",
                        help="read mua from the JSON output of phantomlab fit ... --json instead of OPTICS.csv")
    parser.add_argument(
        "--source", default=None, metavar="S",
        help=f"haemoglobin table: {', '.join(HAEMOGLOBIN_SOURCES)} (default {DEFAULT_HAEMOGLOBIN_SOURCE}, "
        "or the table holding methb and cohb when they are asked)",
    )
    parser.add_argument("--temperature-c", type=float, default=None, metavar="T",
                        help="temperature of the phantom when measured, 0-60 C: the water column absorbs at it "
                        "(default: the recipe's measure_temperature_c with --recipe, else the water tables "
                        "as published, 20-25 C)")
    add_json_option(parser)
    parser.set_defaults(handler=_unmix)


def _spectrum(args):
    from phantomlab.calibration.measurements import read_measurement
    from phantomlab.calibration.fit_json_spectrum import spectrum_from_fit_json

    if (args.optics_file is None) == (args.from_fit is None):
        raise InputError("unmix: give either OPTICS.csv or --from-fit FILE.json (one of them)")
    if args.from_fit is not None:
        from phantomlab.inputs import read_text_file  # regular file, within the file_mb limit

        path = Path(args.from_fit)
        text = read_text_file(path, what="--from-fit file")
        return (*spectrum_from_fit_json(text, name=path.name), path.name)
    measurement = read_measurement(args.optics_file, kind="optics")
    sd = None if measurement.sd is None else measurement.sd[:, 0]
    return measurement.wavelength_nm, measurement.values[:, 0], sd, measurement.name


def _recipe_stocks(path):
    """The recipe's stocks by key (matrix first) and the key of the blood stock to report, if any."""
    from phantomlab.recipe import load_recipe

    recipe = load_recipe(path)
    keys = (recipe.matrix_key, *[k for k in recipe.stock_keys if k != recipe.matrix_key])
    stocks = {key: recipe.stock(key) for key in keys}
    blood = [key for key, stock in stocks.items() if stock.kind == "blood"]
    if recipe.oxygenation is not None:
        return recipe, stocks, recipe.oxygenation.blood_stock, []
    if len(blood) > 1:
        return recipe, stocks, None, [f"unmix: the recipe has {len(blood)} blood stocks ({', '.join(blood)}) and no "
                                      "[oxygenation] blood_stock: no blood volume fraction reported"]
    return recipe, stocks, (blood[0] if blood else None), []


def _unmix(args) -> CommandResult:
    from phantomlab.calibration.unmix import parse_chromophore_list, unmix_spectrum
    from phantomlab.calibration.unmix_stocks import with_recipe_absorbers

    recipe, stocks, blood_stock, notes = (None, {}, None, []) if args.recipe is None else _recipe_stocks(args.recipe)
    chromophores = parse_chromophore_list(args.chromophores, stocks=stocks)
    if recipe is not None:
        chromophores = with_recipe_absorbers(chromophores, stocks)
    from phantomlab.materials.water import checked_liquid_temperature

    temperature = args.temperature_c
    if temperature is None and recipe is not None:
        temperature = recipe.preparation.temperature_c
    if temperature is not None:
        temperature = checked_liquid_temperature(temperature, what="--temperature-c")
    wavelength, mua, sd, name = _spectrum(args)
    result = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=mua, mua_sd_per_mm=sd,
                            chromophores=chromophores, source=args.source, stocks=stocks,
                            blood_stock=blood_stock, water_temperature_c=temperature)
    payload = result.to_json()
    payload["warnings"] = list(payload["warnings"]) + notes
    if recipe is not None:
        payload.setdefault("stock_fractions", {})
        payload.setdefault("stock_fraction_sds", {})
        payload["recipe"] = recipe.name
    payload["input"] = name

    def number(value, sd_value, spec):
        if value is None:
            return "-"
        return f"{value:{spec}} ± {sd_value:{spec}}" if sd_value is not None else f"{value:{spec}}"

    lines = [
        f"unmixing of {name}: {len(result.wavelength_nm)} wavelengths, chromophores {','.join(result.chromophores)}, "
        f"haemoglobin table {result.source}, water "
        + ("as tabulated (20-25 C)" if result.water_temperature_c is None else f"at {result.water_temperature_c:g} C"),
        f"  sO2                 {number(result.so2, result.so2_sd, '.3f')}",
        f"  total haemoglobin   {number(result.thb_um, result.thb_sd_um, '.4g')} uM (tetramer)",
    ]
    for key, label in (("methb", "methaemoglobin"), ("cohb", "carboxyhaemoglobin")):
        if key in result.chromophores:
            lines.append(f"  {label:<19} {number(result.amounts[key], result.amount_sds[key], '.4g')} uM (tetramer)")
    for key, label in (("water", "water fraction"), ("lipid", "lipid fraction")):
        if key in result.chromophores:
            lines.append(f"  {label:<19} {number(result.amounts[key], result.amount_sds[key], '.4g')}")
    if recipe is not None:
        lines.append(f"  volume fractions of the undiluted stocks of recipe {recipe.name!r}:")
        for key, value in result.stock_fractions.items():
            how = "from the total haemoglobin" if key == blood_stock else "unmixed"
            lines.append(f"    {key:<17} {number(value, result.stock_fraction_sds[key], '.4g')} ({how})")
    chi2 = "-" if result.chi2_red is None else f"{result.chi2_red:.3g}"
    lines.append(f"  chi2_red {chi2}, condition number {result.condition_number:.3g}")
    return CommandResult(payload=payload, text="\n".join(lines))
