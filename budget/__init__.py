"""Fluxfence engine: regional atmospheric water-vapour budgets from gridded fields.

    import budget
    fields = budget.open_fields("era_*.nc")
    region = budget.load_region(bbox="5,43,17,49")
    ds = budget.compute(fields, region)        # xarray.Dataset of every term, SI units

The engine never imports the web layer (app/).
"""

__version__ = "0.1.0"


def __getattr__(name):
    # Lazy entry points keep `import budget` light and free of import cycles.
    if name == "compute":
        from .ledger import compute

        return compute
    if name == "open_fields":
        from .fields import open_fields

        return open_fields
    if name == "load_region":
        from .region import load_region

        return load_region
    raise AttributeError(name)
