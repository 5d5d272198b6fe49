"""python -m chimeline"""
from .cli import main

main()
