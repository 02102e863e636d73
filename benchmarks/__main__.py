import sys

if "--startup" in sys.argv[1:]:  # start-up time: fresh processes only, nothing loaded here
    from benchmarks.startup import main
else:
    from benchmarks.run import main

raise SystemExit(main())
