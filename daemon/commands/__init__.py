"""The commands a person types (run, replay, demo, export, watch) and the command line."""
