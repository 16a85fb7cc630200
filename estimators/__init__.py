"""Pure computation for offwatch: plain numbers with explicit times in, small
frozen dataclasses out. No sockets, clocks, files or MQTT, and never ``daemon``.
"""
