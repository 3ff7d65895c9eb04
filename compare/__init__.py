"""compare: fluid against simulation and against the classical formulas; the command line."""

__all__: list[str] = []
