"""``python -m synthgen`` runs the command-line tool."""

from synthgen.cli import main

main()
