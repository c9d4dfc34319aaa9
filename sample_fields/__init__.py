"""The invented demonstration event of Fluxfence (not real weather) and its exact budget.

``ensure_sample()`` returns the paths of the bundled demo files (``.levels``, ``.column``,
``.basin``); ``write_sample(out_dir)`` writes them anew; ``sample_fields.truth`` holds the
closed-form fields and ``exact_budget`` of any polygon.
"""

from .generate import SamplePaths, ensure_sample, write_sample

__all__ = ["SamplePaths", "ensure_sample", "write_sample"]
