"""host.controller: the emulated thyristor DC drive controller (logic, settings, protections)
and the process that runs it on the far end of the link.

Owns nothing itself; re-exports the public names. Importing this package must never import
serial, numba, rtmodel or host.link (only host.controller.process talks to the link).
"""

from host.controller.drive import ControllerSignals, DriveController
from host.controller.protection import TripCode, trip_label, trip_name
from host.controller.settings import KEYS, Settings, from_dict, load_settings

__all__ = ["DriveController", "ControllerSignals", "TripCode", "trip_label", "trip_name",
           "Settings",
           "KEYS", "load_settings", "from_dict"]
