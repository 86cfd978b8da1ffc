"""The commands: one module per `fringecal` command, each with register(command) and its cmd_* function."""
