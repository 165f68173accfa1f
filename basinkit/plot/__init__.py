"""The plotting room: every function takes ``ax=None`` and returns the figure; nothing here
selects a matplotlib backend."""
