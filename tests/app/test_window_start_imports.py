"""The window starts without the heavy parts of SciPy and scikit-learn (seconds of start-up each,
measured with ``python -X importtime``): they are imported when first used (clustering, PCA fits,
practice recordings, quality numbers, probe neighbourhoods), not when a session or recording is opened."""

import os
import subprocess
import sys

HEAVY = ("scipy.signal", "scipy.stats", "scipy.optimize", "scipy.special", "scipy.spatial", "sklearn")


def test_opening_the_window_imports_no_heavy_modules():
    code = ("import sys; import rigside.cli.window as w; w._import_the_engine(); import rigside.gui.launch; "
            f"print([m for m in {HEAVY!r} if m in sys.modules])")
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "[]"
