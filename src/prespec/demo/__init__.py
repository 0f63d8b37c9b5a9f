"""The invented demonstration studies: ``wound`` (``prespec demo``) and ``safety``
(``python -m prespec.demo.safety``). Their data are made up and describe nothing real."""
