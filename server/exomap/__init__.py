"""exomap: steady states, operating maps, setpoint checks and dynamics of exothermic stirred tanks.

Screening aid, not a design or safety basis (see README, "Cautions").
"""

__version__ = "0.1.0"
