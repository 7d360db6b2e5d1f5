from diagnose.cli import main

raise SystemExit(main())
