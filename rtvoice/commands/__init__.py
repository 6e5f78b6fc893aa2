"""The subcommands' argument parsing: the layer above everything it drives.

Each module registers its subcommands with ``register(subparsers)`` and turns the parsed
options into calls on the layer below (offline rendering and presets, the live host and
its UI, the placement survey, the benchmarks). Nothing below this package imports it;
:mod:`rtvoice.cli` wires the modules together in :data:`MODULES`' order.
"""

#: Modules that add subcommands, in the order ``rtvoice --help`` lists them.
MODULES = [
    "rtvoice.commands.render",
    "rtvoice.commands.play",
    "rtvoice.commands.bench",
    "rtvoice.commands.survey",
    "rtvoice.commands.fit",
]
