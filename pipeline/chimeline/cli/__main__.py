"""python -m chimeline.cli"""
from . import main

main()
