"""Statistical methods, one module per method family. Pure functions: counts or arrays in, typed results out.

Bad arguments raise ``ValueError``. Nothing here reads records or prints.
"""
