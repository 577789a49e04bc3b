from tubeyield.cli import main

raise SystemExit(main())
