from probeflow.cli.main import main

raise SystemExit(main())
