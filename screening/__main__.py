"""``python -m screening`` runs the ddscreen command line."""

from .cli import main

main()
