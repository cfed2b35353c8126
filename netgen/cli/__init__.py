"""The command line: click commands only (parse, call the stages, print). No physics.

``root`` holds the group and the one-design commands (demo, size, render, run, doctor);
``studies`` the sweep command; ``handoff`` check, diff and export. Importing this package imports
click and nothing heavy (no simulator, plotting or cluster library).
"""

from .root import cli, main

__all__ = ["cli", "main"]
