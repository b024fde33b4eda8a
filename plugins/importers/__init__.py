"""Built-in import stage: readers for plate-reader exports and plate layouts."""
