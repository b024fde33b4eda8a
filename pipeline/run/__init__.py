"""Running a recipe: the per-plate map (serial, a process pool or Dask), the pooled reduce, the outputs.

``runner`` drives a run, ``executors`` says where plates run, ``outputs`` writes the files beside the audit
file and ``rerun`` reprocesses the raw bytes kept in an old audit file.
"""
