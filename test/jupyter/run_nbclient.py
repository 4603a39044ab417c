"""Executes a notebook with nbclient and prints the executed notebook (nbformat JSON) on stdout.

usage: run_nbclient.py NOTEBOOK KERNEL_NAME
"""
import sys

import nbformat
from nbclient import NotebookClient

nb = nbformat.read(sys.argv[1], as_version=4)
NotebookClient(nb, kernel_name=sys.argv[2], timeout=120, startup_timeout=180, allow_errors=True).execute()
nbformat.write(nb, sys.stdout)
