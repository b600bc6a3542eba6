from riskbench.workflow.cli import main

raise SystemExit(main())
