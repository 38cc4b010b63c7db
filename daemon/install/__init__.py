"""``linerig-setup``: a rig set up on a Debian or Raspberry Pi OS machine from the installed package.

`layout` says where each file goes, `detect` finds the front end and the supply on the serial ports, `render` writes
the files from the packaged ones, `host` is the machine (a live one, or a throwaway root for tests), `plan` turns
all of it into a list of `changes`, `selfcheck` reports what the rig looks like afterwards, and `main` is the command.
"""
