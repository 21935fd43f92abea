"""One module per subcommand: `add_parser(subparsers, help)` and `run(args) -> int`."""
