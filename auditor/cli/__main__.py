"""python -m auditor.cli"""

from . import main

main()
