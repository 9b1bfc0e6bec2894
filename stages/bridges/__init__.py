"""Third floor: the chain inside other libraries (scikit-learn estimators, Dask).

Imports the core and the second floor, never the files.
"""
