from reporter.cli import main

raise SystemExit(main())
