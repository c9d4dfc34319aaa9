"""The invented demonstration event of Fluxfence (not real weather) and its exact budget.

``ensure_sample()`` returns the paths of the bundled demo files (``.levels``, ``.column``,
``.basin``); ``write_sample(out_dir)`` writes them anew; ``sample_fields.truth`` holds the
closed-form fields and ``exact_budget`` of any polygon.
"""

__all__ = ["SamplePaths", "ensure_sample", "write_sample"]


def __getattr__(name):
    # imported on first use, so `python -m sample_fields.generate` runs the module only once
    if name in __all__:
        from . import generate

        return getattr(generate, name)
    raise AttributeError(f"module 'sample_fields' has no attribute {name!r}")
