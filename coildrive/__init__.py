"""coildrive: peak-and-hold drive design for solenoids, relays and valves.

The library is usable without the command line::

    from coildrive.config import load_drive
    from coildrive.design import design
    result = design(load_drive("examples/demo-valve.toml"))
"""

__version__ = "0.1.0"
