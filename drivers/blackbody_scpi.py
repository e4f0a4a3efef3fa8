"""Blackbody driver for the nightbench line protocol: its command table, declared.

The base (drivers/kinds.py) turns each line into a method; the simulator (simulators/servers.py)
answers the same lines, so the two cannot drift apart. Station settings: `limits: {min_c, max_c,
min_difference_k, max_difference_k}` and `safe_c`.
"""

from __future__ import annotations

from drivers.declare import BOOL, TEXT, Dialect, Query, Setting
from drivers.kinds import DeclaredBlackbody

MODE_WORDS = {"ABS": "absolute", "DIFF": "difference"}


class ScpiBlackbody(DeclaredBlackbody):
    """An area blackbody with absolute and difference-to-reference control."""

    DIALECT = Dialect(read_termination="\n", write_termination="\n", ok="OK",
                      error_reply='ERR {code},"{message}"', true_words=("1",),
                      false_words=("0",))
    COMMANDS = {
        "identify": Query("*IDN?", TEXT, meaning="maker,model,serial,firmware"),
        "set_mode": Setting("SOUR:MODE {mode}", meaning="ABS or DIFF control"),
        "mode": Query("SOUR:MODE?", "(?P<value>ABS|DIFF)", words=MODE_WORDS,
                      meaning="control mode"),
        "set_temperature": Setting("SOUR:TEMP {value:.4f}", unit="C",
                                   meaning="absolute setpoint (switches to ABS)"),
        "set_difference": Setting("SOUR:DIFF {value:.4f}", unit="K",
                                  meaning="difference setpoint (switches to DIFF)"),
        "setpoint": Query("SOUR:SETP?", meaning="setpoint in the current mode's unit"),
        "temperature": Query("MEAS:TEMP?", unit="C", meaning="source (emitter) temperature"),
        "reference_temperature": Query("MEAS:REF?", unit="C",
                                       meaning="reference (ambient) sensor temperature"),
        "difference": Query("MEAS:DIFF?", unit="K", meaning="source minus reference"),
        "stable": Query("STAT:STAB?", BOOL, meaning="controller stability flag"),
        "error": Query("SYST:ERR?", '(?P<code>-?\\d+),"(?P<message>.*)"',
                       meaning="last error, 0 when none (reading clears it)"),
    }
