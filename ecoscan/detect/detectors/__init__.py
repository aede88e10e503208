"""The detectors, one module each, behind one interface (:mod:`.base`) and a registry
(:mod:`.registry`): a module here that defines ``DETECTOR`` is a detector."""
