"""From samples to events and features: the zero-phase band-pass (chunked, with margins), robust
noise and bad-channel flags, threshold-independent peak detection, the streaming pipeline, Rice's
noise-only crossing rates, snippets and features. May import ``io``, ``params``, ``events`` and the
shared modules; nothing about units or quality.
"""
