"""What we command: controllers that read only what a real exoskeleton senses.

Nothing in this package may import ``sim`` or ``scenarios``: a controller here
must be able to run on hardware unchanged.  It is filled by the controller
issues (controller interface, hierarchical QP and its tasks).
"""
