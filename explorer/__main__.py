from explorer.cli import main

raise SystemExit(main())
