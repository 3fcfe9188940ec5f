from tinyconv.cli import main

raise SystemExit(main())
