#!/bin/sh
# Point every citation of the reference notes at their copies in docs/ (idempotent: run it again after a merge).
# From the repository root:  sh docs/relink-citations.sh
git grep -lzE '(factors|degree-days)\.md' -- . ':!docs' | xargs -0 -r perl -pi -e 's{(?:/work/shared/reference/|(?:\.\./)+shared/reference/|(?<![\w/.-]))(factors|degree-days)\.md}{docs/$1.md}g'
