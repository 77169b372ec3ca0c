#!/usr/bin/env bash
# The workstation's smoke test: starts the real window under Xvfb on the sample scan, takes a
# screenshot of each view as the app puts it on the stage, clicks into a plane view with
# xdotool, and fails if the app exits non-zero, never reports the click, or a view's
# screenshot is blank. A second run opens a copy of the sample project and shows the desk
# (a specimen's landmarks while placing) and the analysis view.
#
#   scripts/gui_smoke.sh [OUT_DIR]      (default target/gui-smoke)
#
# Needs xvfb-run, ImageMagick (import, convert) and xdotool; .ci/run installs them. Uses the
# binary the test build made (target/debug/sutura), or SUTURA_BIN.
set -euo pipefail
cd "$(dirname "$0")/.."
OUT=${1:-target/gui-smoke}
BIN=${SUTURA_BIN:-target/debug/sutura}

if [ -z "${SUTURA_SMOKE_INNER:-}" ]; then
  for tool in xvfb-run import convert xdotool; do
    if ! command -v "$tool" >/dev/null 2>&1; then
      echo "gui_smoke: $tool is missing (apt-get install xvfb imagemagick xdotool)" >&2
      exit 1
    fi
  done
  if [ ! -x "$BIN" ]; then
    cargo build --bin sutura
  fi
  mkdir -p "$OUT"
  rm -f "$OUT"/*.png "$OUT"/app.log
  exec env SUTURA_SMOKE_INNER=1 xvfb-run -a -s "-screen 0 1280x800x24 -nolisten tcp" \
    bash "$0" "$OUT"
fi

LOG="$OUT/app.log"
fail() {
  echo "gui_smoke: FAILED: $*" >&2
  echo "--- app output ---" >&2
  cat "$LOG" >&2 || true
  kill "$PID" 2>/dev/null || true
  exit 1
}

# waits up to $2 seconds for a line matching $1 in the app's output
wait_for() {
  local pattern=$1 secs=$2 i
  for ((i = 0; i < secs * 10; i++)); do
    if grep -q -- "$pattern" "$LOG"; then return 0; fi
    if ! kill -0 "$PID" 2>/dev/null; then
      grep -q -- "$pattern" "$LOG"
      return
    fi
    sleep 0.1
  done
  return 1
}

# unique colours in a region WxH+X+Y of a screenshot (blank is 1 or a handful)
colours() {
  convert "$1" -crop "$2" +repage -format '%k' info:
}

: >"$LOG"
SUTURA_SMOKE=1 SUTURA_SMOKE_HOLD=${SUTURA_SMOKE_HOLD:-5} \
  "$BIN" open sample_volumes/HDC-002.nii.gz >"$LOG" 2>&1 &
PID=$!

for view in k_plane i_plane j_plane oblique 3D; do
  wait_for "smoke: ready $view " 180 || fail "the $view view never reported a picture"
  line=$(grep "smoke: ready $view " "$LOG" | head -1)
  IFS=, read -r x0 y0 x1 y1 <<<"${line##*stage=}"
  sleep 0.4
  shot="$OUT/$view.png"
  import -window root "$shot"
  region="$((x1 - x0))x$((y1 - y0))+$x0+$y0"
  n=$(colours "$shot" "$region")
  echo "gui_smoke: $view: $n colours in the stage ($region)"
  [ "$n" -gt 64 ] || fail "the $view screenshot is blank ($n colours in $region)"
  if [ "$view" = k_plane ]; then
    win=$(xdotool search --name '^Sutura' | head -1)
    [ -n "$win" ] || fail "no window named Sutura"
    cx=$((x0 + (x1 - x0) / 3))
    cy=$((y0 + (y1 - y0) * 2 / 5))
    # the pointer enters the window first, as a hand would move it, then clicks
    xdotool mousemove --window "$win" "$cx" "$cy"
    sleep 0.3
    xdotool click 1
    wait_for "smoke: crosshair moved" 10 || fail "the click at $cx,$cy did not reach the app"
    sleep 0.4
    import -window root "$OUT/k_plane_clicked.png"
  fi
done

set +e
wait "$PID"
rc=$?
set -e
[ "$rc" -eq 0 ] || fail "the app exited with code $rc"
grep -q "smoke: done" "$LOG" || fail "the app closed before showing every view"
n=$(convert "$OUT/k_plane.png" "$OUT/k_plane_clicked.png" -compose difference -composite -format '%[fx:mean>0]' info:)
[ "$n" = 1 ] || fail "the click changed nothing on screen"

# the desk: a copy of the sample project (its scans linked beside it), specimen HDC-002 with its
# landmarks while placing, then the analysis view with the morphospace
DESK="$OUT/desk_project"
rm -rf "$DESK"
mkdir -p "$DESK"
cp sample_volumes/sample_project.json "$DESK/"
for f in sample_volumes/*.nii.gz sample_volumes/*_slices; do ln -s "$PWD/$f" "$DESK/"; done
LOG="$OUT/desk.log"
: >"$LOG"
SUTURA_SMOKE=desk SUTURA_SMOKE_HOLD=${SUTURA_SMOKE_HOLD:-5} \
  "$BIN" open "$DESK/sample_project.json" >"$LOG" 2>&1 &
PID=$!
for view in digitise analysis; do
  wait_for "smoke: ready $view " 180 || fail "the $view view never got ready"
  line=$(grep "smoke: ready $view " "$LOG" | head -1)
  IFS=, read -r x0 y0 x1 y1 <<<"${line##*stage=}"
  sleep 0.6
  shot="$OUT/$view.png"
  import -window root "$shot"
  region="$((x1 - x0))x$((y1 - y0))+$x0+$y0"
  n=$(colours "$shot" "$region")
  echo "gui_smoke: $view: $n colours ($region)"
  [ "$n" -gt 64 ] || fail "the $view screenshot is blank ($n colours in $region)"
done
set +e
wait "$PID"
rc=$?
set -e
[ "$rc" -eq 0 ] || fail "the desk run exited with code $rc"
grep -q "smoke: done" "$LOG" || fail "the desk run closed before the analysis view"
# A new user, with real keys and clicks only: start a project from the sample scans (Ctrl+N,
# type where to save it, Enter, type the scans' folder, Enter, Enter on the empty field makes
# the project), start a trial (Ctrl+T, type a name, Enter), place three landmarks by clicks on
# the stage, save (Ctrl+S), quit (Ctrl+Q); then the project file must hold the three landmarks.
USER_DIR="$PWD/$OUT/user"
rm -rf "$USER_DIR"
mkdir -p "$USER_DIR"
PROJECT="$USER_DIR/my_skulls.json"
LOG="$OUT/user.log"
: >"$LOG"
SUTURA_SMOKE=user "$BIN" open sample_volumes/HDC-002.nii.gz >"$LOG" 2>&1 &
PID=$!
# types text one key at a time, as a hand does
type_keys() {
  local text=$1 i c k
  for ((i = 0; i < ${#text}; i++)); do
    c=${text:i:1}
    case "$c" in
      /) k=slash ;; .) k=period ;; _) k=underscore ;; -) k=minus ;; " ") k=space ;;
      [A-Z]) k="shift+$(echo "$c" | tr 'A-Z' 'a-z')" ;;
      *) k=$c ;;
    esac
    xdotool key "$k"
  done
}
wait_for "smoke: state window" 120 || fail "the window never showed"
sleep 1
win=$(xdotool search --name '^Sutura' | head -1)
[ -n "$win" ] || fail "no window named Sutura"
# no window manager under Xvfb: give the window the keyboard focus as one would
xdotool windowfocus "$win"
xdotool mousemove --window "$win" 640 400
sleep 0.5
xdotool key ctrl+n
wait_for "smoke: state form" 20 || fail "Ctrl+N did not open the new-project form"
sleep 0.5
type_keys "$PROJECT"
xdotool key Return
sleep 0.5
type_keys "$PWD/sample_volumes"
xdotool key Return
wait_for "smoke: state form read 10" 180 || fail "the form did not list and read the ten sample scans"
sleep 0.5
xdotool key Return
wait_for "smoke: state specimens 10" 300 || fail "the project was not made with its ten specimens"
import -window root "$OUT/user_project.png"
xdotool key ctrl+t
wait_for "smoke: state operator" 30 || fail "Ctrl+T did not ask the operator's name"
sleep 0.5
type_keys "Ana"
xdotool key Return
wait_for "smoke: state trial 1 by Ana" 30 || fail "typing a name and Enter did not start the trial"
wait_for "smoke: ready placing " 180 || fail "the first specimen's scan never showed while placing"
line=$(grep "smoke: ready placing " "$LOG" | head -1)
IFS=, read -r x0 y0 x1 y1 <<<"${line##*stage=}"
n=0
for f in "0.35 0.45" "0.5 0.4" "0.62 0.55"; do
  read -r fx fy <<<"$f"
  cx=$(awk -v a="$x0" -v b="$x1" -v f="$fx" 'BEGIN { printf "%d", a + (b - a) * f }')
  cy=$(awk -v a="$y0" -v b="$y1" -v f="$fy" 'BEGIN { printf "%d", a + (b - a) * f }')
  xdotool mousemove --window "$win" "$cx" "$cy"
  sleep 0.4
  xdotool click 1
  n=$((n + 1))
  wait_for "smoke: state placed $n" 20 || fail "click $n at $cx,$cy placed no landmark"
  sleep 0.3
done
import -window root "$OUT/user_placed.png"
xdotool key ctrl+s
wait_for "smoke: state saved" 20 || fail "Ctrl+S did not save the project"
xdotool key ctrl+q
set +e
wait "$PID"
rc=$?
set -e
[ "$rc" -eq 0 ] || fail "the user run exited with code $rc"
python3 - "$PROJECT" <<'PY' || fail "the saved project does not hold the three landmarks"
import json, sys
p = json.load(open(sys.argv[1]))
assert len(p["specimens"]) == 10, len(p["specimens"])
s = p["specimens"][0]
t = s["trials"][0]
assert (t["id"], t["operator"]) == ("1", "Ana"), (t["id"], t["operator"])
placed = [l for l in t["landmarks"] if l["state"] == "placed"]
assert len(placed) == 3, t["landmarks"]
assert all(len(l["position_mm"]) == 3 and l["method"] in ("slice", "surface") for l in placed)
print(f"gui_smoke: user run: {s['id']} trial 1 by Ana holds", ", ".join(l["id"] for l in placed))
PY

echo "gui_smoke: ok ($(ls "$OUT"/*.png | wc -l) screenshots in $OUT)"
