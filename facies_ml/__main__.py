from facies_ml.cli import main

raise SystemExit(main())
