"""The shared kinetics vocabulary of the built-in stages: what every stage package imports and none owns.

Flags, well names, the rates-table schema, exclusions and overrides, one batched least-squares solver and
one progress-curve simulator live here, so that the stage packages (importers, blank, rates, convert, fit,
report, export) depend on this package and not on each other's insides. Plugin authors may use it too.
"""
