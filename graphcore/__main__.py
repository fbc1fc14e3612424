from graphcore.cli.main import main

raise SystemExit(main())
