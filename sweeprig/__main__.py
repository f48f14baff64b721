"""``python -m sweeprig``: the command line."""

try:
    from sweeprig.cli.entry import main
except KeyboardInterrupt:  # Ctrl-C before the stop handlers exist
    raise SystemExit(130) from None

main()
