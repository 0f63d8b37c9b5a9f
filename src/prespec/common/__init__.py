"""The small rules every room shares: canonical JSON and digests, how text is shown, how a data
cell matches a plan value, the departure codes, the caution, the package versions recorded and
the base of the typed documents. Nothing here imports another room."""
