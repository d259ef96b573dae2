from regionmap.cli import main

raise SystemExit(main())
