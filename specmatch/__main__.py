from specmatch.cli import main

raise SystemExit(main())
