"""archive: a knowledge base of finished A/B tests.

Records live as YAML files in ``records/``; :mod:`archive.validate` checks them, :mod:`archive.index` loads them
into a database, :mod:`archive.query` finds them again. The command line (:mod:`archive.cli`) is a thin layer
over these modules.
"""

__version__ = "0.1.0"
