"""The NMEA 0183 codec: pure text in, typed values out (and back), no I/O."""
