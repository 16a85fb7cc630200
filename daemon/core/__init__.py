"""What ties the way in to the way out: the pipeline, its assembly from a config, the
alert lifecycle, the config itself and the small state files."""
