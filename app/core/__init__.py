"""Pure numerics: preparing series, correlograms, differencing tests, candidate fits, ranking.

Nothing in this package imports a web framework or database code.
"""
