"""The background import of heavy modules (core.preload)."""

import sys

from rigside.core.preload import preload


def test_preload_imports_in_a_thread_and_skips_what_fails():
    sys.modules.pop("json.tool", None)
    loading = preload("no_such_module_of_rigside", "json.tool")
    loading.join(timeout=30)
    assert not loading.is_alive()
    assert "json.tool" in sys.modules
    assert "no_such_module_of_rigside" not in sys.modules
