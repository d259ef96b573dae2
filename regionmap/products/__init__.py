"""Products made from a finished run's ``cells.nc`` and ``profiles.nc``."""
