"""``linerig.systemd``: the unit, udev rules, sysusers file and example configuration, shipped as package data.

Nothing here is imported; ``linerig.daemon.resources`` finds the files and ``linerig-setup`` installs them.
"""
