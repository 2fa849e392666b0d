"""File input and output: rig logs (CSV, Parquet, ASAM MDF, HDF5), model files, pipeline files.

This layer may use pandas, asammdf and h5py; the numeric core never imports them.
"""
