"""Studies made of many workflow runs that share one store.

sweep.py: values for any key paths, as a grid or as paired lists, run in parallel (Dask) and resumable;
linear.py: exact superposition for power sweeps of a linear heat problem; convergence.py: successively
refined meshes, observed order, Richardson estimate and grid convergence index.  See docs/studies.md.
"""
