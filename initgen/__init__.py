"""initgen: perturbed land-surface initial states from shared experiment recipes.

The public API::

    initgen.apply(recipe, input, output, layout=None)   # write a perturbed copy + provenance
    initgen.perturb(dataset, recipe, layout=None)       # in memory: (new xarray.Dataset, ledger)
    initgen.preview(recipe, input, layout=None)         # dry run: the ledger only
    initgen.check(recipe, layout=None, input=None)      # validate, write nothing
"""

from initgen._version import __version__

__all__ = ["apply", "check", "perturb", "preview", "__version__"]


def __getattr__(name):  # import the API on first use, so `import initgen` stays light
    if name in ("apply", "check", "perturb", "preview"):
        from initgen import api

        return getattr(api, name)
    raise AttributeError(f"module 'initgen' has no attribute {name!r}")
