#!/bin/sh
# Mutation test of the health checks: for each check in stats.Checks and each
# compare check in stats.CompareChecks, drop it from its list in a scratch
# copy of the repository and run the tests of the packages that cover the
# checks (stats, check, cmd/vitals). Every drop must make some test fail; a
# check whose removal leaves all tests passing is reported as UNCOVERED and
# the script exits 1.
#
# The checks are read from the two lists in stats/checks.go (a check added
# to either list is picked up without editing this script), each variable's
# name from its `var x = &Check{ Name: "x"` definition in stats/.
#
# Generated-file tests that list every check by construction (docs/checks.md,
# the README reference table) are skipped, so that a drop is caught by a test
# of what the check does, not by a stale document.
#
# Usage: scripts/mutate-checks.sh [check-name ...]   (default: all)
set -eu
ROOT=$(cd "$(dirname "$0")/.." && pwd)
WORK=$(mktemp -d)
trap 'rm -rf "$WORK"' EXIT INT TERM
SKIP='TestChecksDoc|TestReferenceTable|TestCorpusTable'
PKGS='./stats ./check ./cmd/vitals'
: "${VITALS_CONFORMANCE:=$ROOT/../shared/onnx-conformance}"
export VITALS_CONFORMANCE

# the variables in `var Checks = []*Check{...}` and `var CompareChecks = []*Check{...}`
vars=$(perl -0ne 'while (/^var (?:Checks|CompareChecks) = \[\]\*Check\{([^}]*)\}/mg) { my $l = $1; print "$_\n" for $l =~ /\b([A-Za-z_][A-Za-z0-9_]*)\b/g }' "$ROOT/stats/checks.go")
[ -n "$vars" ] || { echo "no checks found in the lists of stats/checks.go" >&2; exit 2; }
pairs=""
for var in $vars; do
	# the check's name: the first Name: "..." after `var <var> = &Check{`
	name=$(awk -v v="$var" '$0 ~ "^var "v" = &Check\\{" {f=1} f && /^\tName: *"/ {gsub(/[",]/,"",$2); print $2; exit}' "$ROOT"/stats/*.go)
	[ -n "$name" ] || { echo "check variable $var: no definition with a Name in stats/" >&2; exit 2; }
	pairs="$pairs $name=$var"
done

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
	if (cd "$WORK/repo" && go vet $PKGS >/dev/null 2>&1 && go test -count=1 -skip "$SKIP" $PKGS >"$WORK/out" 2>&1); then
		echo "UNCOVERED  $name: every test passes with it switched off"
		uncovered=$((uncovered + 1))
	else
		failed=$(grep -E '^\s*--- FAIL' "$WORK/out" | sed -E 's/^\s*--- FAIL: ([^ ]+).*/\1/' | sort -u | head -4 | tr '\n' ' ')
		echo "covered    $name: ${failed:-build or vet failed}"
	fi
done
[ "$uncovered" -eq 0 ] || { echo "$uncovered check(s) uncovered"; exit 1; }
echo "every check is covered by a failing test"
