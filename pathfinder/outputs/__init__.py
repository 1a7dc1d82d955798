"""Writing results: tables, the model file, the run record, and the output folder."""
