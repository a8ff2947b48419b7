"""The headless subcommands of `reviewer`; each module offers `register(subparsers)`."""
