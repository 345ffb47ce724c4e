"""Pure physics: numpy arrays in, numpy arrays out, no I/O.

Every function documents its units in brackets and cites the published model it
implements. The same function serves scalars, numpy arrays and dask blocks.
"""
