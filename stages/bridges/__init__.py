"""Third floor: the chain inside other libraries and runtimes (scikit-learn estimators, Dask, ONNX).

Imports the core and the second floor, never the files.
"""
