"""The SI domain, no I/O: the column (``column``), derived layer properties
(``media``), nonlinear sorption (``sorption``), time schedules (``schedules``) and the
chemical table (``chemicals``).
"""
