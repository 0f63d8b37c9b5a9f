"""The steps in their order, and the only place that knows it: check, lock, amend, history
(``lock``), rehearse, run (``run``, ``execute``, ``publish``), design and verify. Each step
records through ``audit.record``; ``api`` names them."""
