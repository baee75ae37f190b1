"""The demo command: the whole job on an invented table."""

import time

from dopantgap.cli.common import Command


def _add_demo_parser(commands):
    demo = commands.add_parser("demo", help="run the whole job on an invented table")
    demo.add_argument("--out", default="dopantgap_demo", metavar="DIR", help="folder for the demo's files")


def _command_demo(arguments, say):
    from dopantgap.demo import run_demo

    started = time.perf_counter()
    run_demo(arguments.out, report=say)
    say(f"Demo finished in {time.perf_counter() - started:.0f} s; files in {arguments.out}")


COMMANDS = {"demo": Command(_add_demo_parser, _command_demo)}
