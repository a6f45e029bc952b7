from modeldiff.cli import run

run()
