"""Shared test setup: Qt renders offscreen (set before anything imports Qt)."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
