from regbench.cli import main

raise SystemExit(main())
