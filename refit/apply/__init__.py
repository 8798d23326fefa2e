"""Apply: coefficient files on fossil measurements.

``estimates`` applies one or many files to a fossil table (estimates, intervals, flags),
``propagation`` carries measurement and burial uncertainty by seeded Monte Carlo,
``compare`` sets the intervals of several fits side by side. Applying a file never
refits: this package never imports ``refit.validate``.
"""
