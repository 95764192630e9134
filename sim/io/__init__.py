"""I/O layer: atomic files and staged folders (`atomic`, importing nothing of sim) and the
CSV/JSON writers of a run (`writers`)."""
