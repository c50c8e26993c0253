from __future__ import annotations

from parentage.cli import main

raise SystemExit(main())
