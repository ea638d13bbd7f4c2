"""eigenfarm: low-frequency vibrational modes of very large amorphous solids.

Data flows one way: configuration → Hessian store → plan → solve → mode catalogue → analyses.
"""

__version__ = "0.1.0"
