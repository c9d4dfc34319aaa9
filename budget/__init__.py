"""Fluxfence engine: regional atmospheric water-vapour budgets from gridded fields.

The engine never imports the web layer (app/).
"""

__version__ = "0.1.0"
