"""Fluxfence engine: regional atmospheric water-vapour budgets from gridded fields.

    import budget
    fields = budget.open_fields("era_*.nc")
    region = budget.load_region(bbox="5,43,17,49")
    ds = budget.compute(fields, region)        # xarray.Dataset of every term, SI units
    budget.export.write_csv(ds, "budget.csv")

The options of a run are values: ``budget.compute(fields, region,
options=budget.BudgetOptions(method="area", closure=budget.ClosureOptions(mass_correction="off")),
run=budget.RunOptions(scheduler="sync"))``.

The engine never imports the web layer (app/).
"""

__version__ = "0.1.0"

__all__ = [
    "__version__",
    # the three steps
    "open_fields",
    "load_region",
    "compute",
    # options of a run
    "BudgetOptions",
    "ClosureOptions",
    "RunOptions",
    # errors a user can act on
    "FieldsError",
    "RegionError",
    "RequestError",
    # modules of the public API
    "export",
    "terms",
    "units",
]

# name -> (module, attribute or None for the module itself); loaded on first use, which keeps
# `import budget` light and free of import cycles.
_LAZY = {
    "open_fields": ("fields", "open_fields"),
    "load_region": ("region", "load_region"),
    "compute": ("ledger", "compute"),
    "BudgetOptions": ("options", "BudgetOptions"),
    "ClosureOptions": ("options", "ClosureOptions"),
    "RunOptions": ("options", "RunOptions"),
    "FieldsError": ("errors", "FieldsError"),
    "RegionError": ("errors", "RegionError"),
    "RequestError": ("errors", "RequestError"),
    "export": ("export", None),
    "terms": ("terms", None),
    "units": ("units", None),
}


def __getattr__(name):
    if name not in _LAZY:
        raise AttributeError(f"module 'budget' has no attribute {name!r}")
    import importlib

    module, attr = _LAZY[name]
    mod = importlib.import_module(f".{module}", __name__)
    return mod if attr is None else getattr(mod, attr)


def __dir__():
    return sorted(set(globals()) | set(__all__))
