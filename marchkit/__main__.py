try:
    from .cli import entry
except KeyboardInterrupt:       # Ctrl-C while Python is still loading marchkit
    import sys

    sys.stderr.write("interrupted\n")
    raise SystemExit(130) from None

entry()
