#!/bin/sh
# abtally plan: the boundary schedule, the sample size and the usage errors.
# Reference values: R package rpact 3.3.4 (Debian r-cran-rpact), e.g.
#   getDesignGroupSequential(kMax=5, alpha=0.05, sided=2, typeOfDesign="asOF")$criticalValues
#     -> 4.8768849488 3.3570119217 2.6802800670 2.2898167744 2.0310320482
#   getDesignGroupSequential(kMax=5, alpha=0.05, sided=2, typeOfDesign="asP")$criticalValues
#     -> 2.4379766881 2.4268138632 2.4101938382 2.3966454044 2.3859845623
#   getDesignGroupSequential(informationRates=c(0.2,0.45,0.7,1.0), alpha=0.05,
#     sided=2, typeOfDesign="asOF")$criticalValues
#     -> 4.8768849488 3.1438483819 2.4515350834 2.0010886863
#   getDesignCharacteristics(<the asOF K=5 design, beta=0.2>)$inflationFactor
#     -> 1.0247198810
# and SciPy 1.10.1: (norm.ppf(.975)+norm.ppf(.8))**2*2*.05*.95/.0025**2
#     = 119302.97 -> 119,303 units per arm (METHODS.md §9).
# The JSON is read with python3's json module only.
# Run with $ABTALLY pointing at the binary; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
fails=0

fail() {
    echo "FAIL: $*"
    fails=$((fails + 1))
}

# check_json "ARGS" PYTHON-EXPR: runs plan ARGS --json and evaluates the
# expression with j bound to the parsed object; it must be true.
check_json() {
    out=$($ABTALLY plan $1 --json 2>&1)
    rc=$?
    if [ "$rc" -ne 0 ]; then
        fail "plan $1 --json: exit $rc: $out"
        return
    fi
    if ! printf '%s' "$out" | python3 -c '
import json, sys
j = json.load(sys.stdin)
def close(a, e, tol):
    return a is not None and abs(a - e) <= tol
def zs(want, tol=1e-4):
    return len(j["looks"]) == len(want) and all(
        close(l["z"], w, tol) for l, w in zip(j["looks"], want))
ok = eval("(" + sys.argv[1] + ")")
sys.exit(0 if ok else 1)
' "$2"; then
        fail "plan $1 --json: not ($2): $out"
    fi
}

# check_exit CODE "ARGS": plan ARGS exits with CODE and one stderr line
# starting "abtally: plan: ".
check_exit() {
    err=$($ABTALLY plan $2 2>&1 >/dev/null)
    rc=$?
    [ "$rc" -eq "$1" ] || fail "plan $2: exit $rc, expected $1"
    lines=$(printf '%s\n' "$err" | wc -l)
    case $err in
    "abtally: plan: "*) [ "$lines" -eq 1 ] || fail "plan $2: $lines stderr lines: $err" ;;
    *) fail "plan $2: stderr '$err'" ;;
    esac
}

# Boundaries alone: the n fields are null.
check_json "--looks 5 --spending obf --alpha 0.05" \
    'zs([4.8768849488, 3.3570119217, 2.6802800670, 2.2898167744, 2.0310320482])
     and j["n_per_arm"] is None and j["n_total"] is None and j["days"] is None
     and close(j["inflation"], 1.0247198810, 1e-5)
     and close(j["looks"][4]["alpha_cumulative"], 0.05, 1e-12)
     and close(j["looks"][0]["fraction"], 0.2, 1e-15)
     and close(sum(l["alpha_spent"] for l in j["looks"]), 0.05, 1e-12)'
check_json "--looks 5 --spending pocock --alpha 0.05" \
    'zs([2.4379766881, 2.4268138632, 2.4101938382, 2.3966454044, 2.3859845623])'
check_json "--fractions 0.2,0.45,0.7,1.0 --spending obf" \
    'zs([4.8768849488, 3.1438483819, 2.4515350834, 2.0010886863])
     and [l["fraction"] for l in j["looks"]] == [0.2, 0.45, 0.7, 1.0]'
# rpact: typeOfDesign="asHSD", gammaA=-4, kMax=5
check_json "--looks 5 --spending hsd --gamma -4" \
    'zs([3.2526684884, 2.9860459492, 2.6916574463, 2.3736669496, 2.0253209993])'
check_json "--looks 5 --spending hsd" \
    'zs([3.2526684884, 2.9860459492, 2.6916574463, 2.3736669496, 2.0253209993])'
# One look: the fixed-horizon z_{.975} = 1.959963984540054 (scipy norm.isf(0.025)).
check_json "" 'zs([1.959963984540054], 1e-6) and j["inflation"] == 1'

# Sample size (METHODS.md §9; SciPy above).
check_json "--metric binary --baseline 0.05 --mde 0.0025" \
    'j["n_per_arm"] == [119303, 119303] and j["n_total"] == 238606 and j["days"] is None'
check_json "--metric binary --baseline 0.05 --mde 0.05 --relative --daily-units 20000" \
    'j["n_per_arm"] == [119303, 119303] and j["days"] == 12'
# With 5 OBF-type looks: ceil(119302.972 * 1.0247198810) = 122,253 per arm.
check_json "--metric binary --baseline 0.05 --mde 0.0025 --looks 5" \
    'j["n_per_arm"] == [122253, 122253] and j["n_total"] == 244506'
# Mean metric, sd 10, delta 1, 0.2/0.8 split: scipy
# (norm.ppf(.975)+norm.ppf(.8))**2*100*(1/.2+1/.8) = 4905.55 -> 982 + 3925.
check_json "--metric mean --sd 10 --mde 1 --weights 0.2,0.8" \
    'j["n_per_arm"] == [982, 3925] and j["n_total"] == 4907'

# The table prints without --json.
out=$($ABTALLY plan --metric binary --baseline 0.05 --mde 0.0025 --looks 5 --daily-units 20000)
[ $? -eq 0 ] || fail "plan table: exit $?"
printf '%s\n' "$out" | grep -q '^ *5 *1.0000 *244506 *2.0310' || fail "plan table: last look row: $out"
printf '%s\n' "$out" | grep -q 'units per arm *122253 122253' || fail "plan table: units: $out"

# --help teaches; --version answers.
$ABTALLY plan --help | grep -q 'example' || fail "plan --help: no example"
$ABTALLY plan --version | grep -q '^abtally ' || fail "plan --version"

# Usage errors (exit 2) and bad values (exit 1).
check_exit 2 "--bogus"
check_exit 2 "--looks 3 --fractions 0.5,1"
check_exit 2 "--looks x"
check_exit 2 "--sides 3"
check_exit 2 "--spending foo"
check_exit 2 "--alpha abc"
check_exit 2 "--gamma 2"
check_exit 2 "--mde 0.01"
check_exit 2 "--metric binary --mde 0.01"
check_exit 2 "--baseline 0.05"
check_exit 2 "stray"
check_exit 1 "--alpha 1.5"
check_exit 1 "--power 0.01"
check_exit 1 "--fractions 0.5,0.9"
check_exit 1 "--fractions 0.5,0.4,1"
check_exit 1 "--looks 200"
check_exit 1 "--metric binary --baseline 1.5 --mde 0.01"
check_exit 1 "--metric mean --sd 0 --mde 1"
check_exit 1 "--metric mean --sd 1 --mde 1 --weights 0.5,0"

[ "$fails" -eq 0 ]
