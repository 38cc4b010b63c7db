"""``linerig.hardware``: the front-end firmware, the probe profiles and the protocol, shipped as package data.

Nothing here is imported; ``linerig.daemon.resources`` finds the files, in a checkout and in an installed wheel alike.
"""
