"""The one log record of ``distributed`` that a Ctrl-C may trigger, and that the series leaves out."""

import logging
import sys

from powderspin.series.runner import _CancelRaceFilter


def _record_from(filename: str, name: str, exc_type=NameError) -> logging.LogRecord:
    src = f"def {name}():\n    raise {exc_type.__name__}('free variable')\n"
    scope = {}
    exec(compile(src, filename, "exec"), scope)
    try:
        scope[name]()
    except exc_type:
        info = sys.exc_info()
    return logging.LogRecord("tornado.application", logging.ERROR, "x", 1, "Exception in callback", None, info)


def test_the_cancel_race_is_dropped():
    rec = _record_from("/site-packages/distributed/utils.py", "cancel")
    assert not _CancelRaceFilter().filter(rec)


def test_other_errors_are_kept():
    f = _CancelRaceFilter()
    assert f.filter(_record_from("/site-packages/distributed/utils.py", "cancel", ValueError))
    assert f.filter(_record_from("/site-packages/distributed/client.py", "cancel"))
    assert f.filter(_record_from("/site-packages/distributed/utils.py", "other"))
    assert f.filter(logging.LogRecord("tornado.application", logging.ERROR, "x", 1, "plain", None, None))
