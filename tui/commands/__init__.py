"""One module per subcommand: HELP, add_arguments(parser), run(args) -> int."""
