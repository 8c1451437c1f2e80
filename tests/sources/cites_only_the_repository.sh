#!/usr/bin/env bash
# Every rule the project applies is stated in docs/standards.md and cited there (or at its published clause);
# nothing in the repository may cite a file outside it (the brief's notes, a sibling folder). Fails listing each hit.
set -euo pipefail
cd "$1"
# The patterns are assembled so that this file does not match itself.
notes="domain""\\.md|BUILD-NOTES""\\.md|STYLE""\\.md|\\.\\./shared/"
if git rev-parse --is-inside-work-tree >/dev/null 2>&1; then
  files=$(git ls-files)
else
  files=$(find . -type f -not -path './build*' -not -path './.git/*' | sed 's#^\./##')
fi
hits=$(printf '%s\n' $files | grep -v -E '^(build|build-sanitize)/' | xargs -d '\n' grep -I -n -E "$notes" -- 2>/dev/null || true)
if [ -n "$hits" ]; then
  echo "files outside the repository are cited (cite docs/standards.md §N or the published clause instead):"
  echo "$hits"
  exit 1
fi
echo "no citation of a file outside the repository in $(printf '%s\n' $files | wc -l) files"
