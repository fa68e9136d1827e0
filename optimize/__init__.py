"""wellwright drivers: command line, figures, design search, growth tolerance, reports.

Everything that drives :mod:`physics` lives here; :mod:`physics` never imports it.
"""
