#!/usr/bin/env bash
# Until the first release, the schema lives in one baseline migration regenerated from the
# models. Run this after changing any models.py; then read the diff of migrations/versions/.
set -euo pipefail
cd "$(dirname "$0")/.."
tmp=$(mktemp -d)
rm -f migrations/versions/*baseline.py
DATABASE_URL="sqlite:///$tmp/gen.db" .venv/bin/alembic revision --autogenerate -m baseline --rev-id 0001 >/dev/null
.venv/bin/ruff format -q migrations/versions
DATABASE_URL="sqlite:///$tmp/check.db" .venv/bin/alembic upgrade head
DATABASE_URL="sqlite:///$tmp/check.db" .venv/bin/alembic check
rm -rf "$tmp"
ls migrations/versions
