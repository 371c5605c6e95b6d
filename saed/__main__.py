from saed.cli import main

raise SystemExit(main())
