"""Running written sweeps: the stage scheduler and the parsers of the solver's logs.
"""
