"""Target wheel driver for the nightbench line protocol: its command table, declared.

Slot names come from the station file (`slots: {1: {name: open}, 2: pinhole_grid, ...}`);
the controller reports slot 0 while travelling.
"""

from __future__ import annotations

from drivers.declare import BOOL, INTEGER, TEXT, Dialect, Query, Setting
from drivers.kinds import DeclaredWheel


class ScpiWheel(DeclaredWheel):
    """A target wheel with named slots."""

    DIALECT = Dialect()
    COMMANDS = {
        "identify": Query("*IDN?", TEXT, meaning="maker,model,serial,firmware"),
        "slot_count": Query("WHL:COUN?", INTEGER, meaning="number of slots"),
        "select_slot": Setting("WHL:POS {slot:d}", meaning="start moving to a slot (1-based)"),
        "current_slot": Query("WHL:POS?", INTEGER, meaning="slot in the beam, 0 while moving"),
        "moving": Query("WHL:MOV?", BOOL, meaning="travelling"),
        "home": Setting("WHL:HOME", meaning="find the index and go to slot 1"),
        "error": Query("SYST:ERR?", '(?P<code>-?\\d+),"(?P<message>.*)"',
                       meaning="last error, 0 when none"),
    }
