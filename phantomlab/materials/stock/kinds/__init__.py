"""The stock kinds (layer 1): one module per kind or family, each with its spec and its parser.

Each module holds the frozen spec dataclass of its kind(s) (what
:attr:`phantomlab.materials.stock.model.Stock.spec` holds) and a
``_parse_<kind>(table, key, base, resolved)`` that reads the kind's fields through
:mod:`phantomlab.materials.stock.readers` and returns ``(spec, density_g_per_ml,
solids_volume_fraction)``, putting the contents of every CSV file it reads into ``resolved``.
The parsers are registered by kind in ``_PARSERS`` of
:mod:`phantomlab.materials.stock.stock_file`.

* :mod:`~.matrix`: the base the phantom is made of;
* :mod:`~.particles`: spheres in a carrier and dry powders (a size distribution each);
* :mod:`~.emulsion`: lipid emulsions described by a published model;
* :mod:`~.absorber`: absorbers from a spectrum, an extinction table or a cuvette series, with their solvent;
* :mod:`~.blood`: whole blood, red cells or a haemoglobin solution.
"""
