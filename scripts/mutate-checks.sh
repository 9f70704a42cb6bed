#!/bin/sh
# Mutation test of the health checks: for each check in stats.Checks and each
# compare check in stats.CompareChecks, drop it from its list in a scratch
# copy of the repository and run the tests of stats and cmd/vitals. Every
# drop must make some test fail; a check whose removal leaves all tests
# passing is reported as UNCOVERED and the script exits 1.
#
# Generated-file tests that list every check by construction (docs/checks.md,
# the README reference table) are skipped, so that a drop is caught by a test
# of what the check does, not by a stale document.
#
# Usage: scripts/mutate-checks.sh [check-name ...]   (default: all)
set -eu
ROOT=$(cd "$(dirname "$0")/.." && pwd)
WORK=$(mktemp -d)
trap 'rm -rf "$WORK"' EXIT
SKIP='TestChecksDoc|TestReferenceTable|TestCorpusTable'

# name → Go variable, from `var xCheck = &Check{ Name: "x"` in stats/check_*.go
pairs=$(awk '/^var [A-Za-z]+ = &Check\{/ {v=$2} /^\tName: *"/ && v!="" {gsub(/[",]/,"",$2); print $2 "=" v; v=""}' "$ROOT"/stats/check_*.go)
[ -n "$pairs" ] || { echo "no checks found" >&2; exit 2; }

uncovered=0
for pair in $pairs; do
	name=${pair%%=*}
	var=${pair#*=}
	if [ $# -gt 0 ]; then
		case " $* " in *" $name "*) ;; *) continue ;; esac
	fi
	rm -rf "$WORK/repo"
	mkdir -p "$WORK/repo"
	(cd "$ROOT" && tar --exclude=.git -cf - .) | (cd "$WORK/repo" && tar -xf -)
	f="$WORK/repo/stats/checks.go"
	# drop the variable from the list it is in (Checks or CompareChecks)
	perl -0pi -e "s/\\b$var\\b,\\s*//; s/,\\s*\\b$var\\b(?=\\})//" "$f"
	if grep -Eq "\\b$var\\b" "$f"; then
		echo "$name: could not drop $var from the list" >&2
		exit 2
	fi
	if (cd "$WORK/repo" && go vet ./stats ./cmd/vitals >/dev/null 2>&1 && go test -count=1 -skip "$SKIP" ./stats ./cmd/vitals >"$WORK/out" 2>&1); then
		echo "UNCOVERED  $name: every test passes with it switched off"
		uncovered=$((uncovered + 1))
	else
		failed=$(grep -E '^\s*--- FAIL' "$WORK/out" | sed -E 's/^\s*--- FAIL: ([^ ]+).*/\1/' | sort -u | head -4 | tr '\n' ' ')
		echo "covered    $name: ${failed:-build or vet failed}"
	fi
done
[ "$uncovered" -eq 0 ] || { echo "$uncovered check(s) uncovered"; exit 1; }
echo "every check is covered by a failing test"
