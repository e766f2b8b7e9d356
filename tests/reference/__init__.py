"""An independent reference for the differential check of exomap's numerical core (issue 9).

``solver`` is written only from the balance equations of DESIGN.md §2 and imports nothing of exomap;
``scenarios`` generates random valid scenario documents together with the same numbers for the solver;
``compare`` runs exomap and the reference on one scenario and lists every disagreement.
"""
