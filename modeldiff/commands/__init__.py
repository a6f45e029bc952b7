"""The commands' wiring: one module a command, each with `configure(parser)` and `run(args, stdout) -> exit code`.

A command module parses and runs; the work is done by the domain modules it calls (so a domain module never
imports its renderer's caller, and a renderer never imports its command). cli.py imports only the module of
the command being run.
"""
