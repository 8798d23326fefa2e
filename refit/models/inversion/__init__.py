"""Classical calibration: solving a forward fit (feature on climate) for climate.

``classical`` holds Fieller's interval and the polynomial inversion for ``Fit`` objects;
``band`` and ``bandgrid`` the numpy-only prediction-band root finding shared with the
coefficient-file evaluator; ``forward`` the forward evaluation of a coefficient file.
Numpy and the standard library only (the coefficient-file consumer imports it).
"""
