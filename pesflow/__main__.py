"""``python -m pesflow`` runs the command line."""

from pesflow.cli import console_main

console_main()
