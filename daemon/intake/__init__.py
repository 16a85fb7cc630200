"""The way in: bytes from a port, socket or file become framed lines, checked sentences,
timed and plausible readings (framer, ingest, timing, counters), from live sources or replay
files, with source priority and magnetic variation."""
