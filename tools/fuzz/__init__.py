"""Fuzzing the way in: mutated real and simulated NMEA through the framer, parsers, TAG blocks and clock."""
