"""An invented blackbody dialect, declared in Python: the worked example of DEVELOPERS.md.

The controller (an invented "TB-7" from an invented lab) ends lines with CR+LF, answers yes/no
questions with YES/NO and refuses with a bare `ERR <code>` (no message). Every line below is
one row of its manual; drivers/kinds.py turns them into the Blackbody interface.
"""

from __future__ import annotations

from drivers.declare import BOOL, TEXT, Dialect, Query, Setting
from drivers.kinds import DeclaredBlackbody


class InventedBlackbody(DeclaredBlackbody):
    """TB-7 area blackbody: absolute or relative (difference) control."""

    DIALECT = Dialect(read_termination="\r\n", write_termination="\r\n", ok="OK",
                      error_reply="ERR {code}", true_words=("YES",), false_words=("NO",),
                      timeout_s=1.0)
    COMMANDS = {
        "identify": Query("WHO?", TEXT, meaning="maker,model,serial,firmware"),
        "set_mode": Setting("T.MODE {mode}", meaning="ABS or REL"),
        "mode": Query("T.MODE?", "(?P<value>ABS|REL)",
                      words={"ABS": "absolute", "REL": "difference"}),
        "set_temperature": Setting("T.SET {value:.2f}", unit="C", limits=(-20.0, 150.0)),
        "set_difference": Setting("T.REL {value:.2f}", unit="K", limits=(-40.0, 100.0)),
        "setpoint": Query("T.SET?", meaning="setpoint, C or K by mode"),
        "temperature": Query("T.NOW?", unit="C", meaning="emitter temperature"),
        "reference_temperature": Query("T.AMB?", unit="C", meaning="ambient sensor"),
        "stable": Query("T.STABLE?", BOOL, meaning="within band for the hold time"),
        "error": Query("T.ERR?", "(?P<code>\\d+)", meaning="last error code, 0 when none"),
    }
