from tests.app.test_audit_view import *
def test_probe(demo_window, qtbot, tmp_path):
    win = demo_window
    path, counts = old_sorting(tmp_path)
    assert win.audit.start(path)
    wait_audit(win, qtbot)
    dock = win.docks["audit"]
    print("tabbed:", [d.objectName() for d in win.tabifiedDockWidgets(dock)], {k: d.isVisible() for k, d in win.docks.items()})
    for d in win.tabifiedDockWidgets(dock):
        d.raise_()
        qtbot.wait(100)
        print("raised", d.objectName(), dock.isVisible(), dock.isHidden(), dock.toggleViewAction().isChecked(), win.traces.rows.count())
