#!/usr/bin/env bash
# Builds the example landmark project of the bundled sample (sample_volumes/sample_project.json)
# and its measurements (sample_volumes/sample_project_measurements.csv) with command-line calls
# only, the way an operator would digitise the ten skulls:
#
# - surface landmarks are picked along a ray from outside the bone towards the landmark, aimed
#   along the axis its definition names (anterior-most: from the front; lateral-most: from the
#   side; the naris wall from inside the opening; the anterior orbit margin and the inner
#   braincase wall from the centre of the orbit and of the braincase), with the aim off the
#   true point by under a voxel, as a hand is;
# - constructed points (cavity and orbit centres) and the posterior orbit wall (thinner than a
#   voxel, so the scan holds no surface there to pick) are placed on slices, within about a
#   voxel of the true point;
# - the dorsal midline is traced through control points near the true curve;
# - four specimens get a second trial by another operator on another day, with other aims, ray
#   tilts and fewer control points; TF-005's crest is marked missing (broken) in its trial.
#
# The true positions come from sample_volumes/ID.landmarks.json (the generator's ground truth);
# Python 3 (standard library only) turns them into aims and rays, deterministically, so the
# output is the same on every run. Time stamps are fixed for the same reason.
set -euo pipefail
cd "$(dirname "$0")/.."
if [ -z "${SUTURA:-}" ]; then
  cargo build --release --quiet
  SUTURA=./target/release/sutura
fi
S=$SUTURA
P=sample_volumes/sample_project.json
PLAN=$(mktemp)
trap 'rm -f "$PLAN"' EXIT

$S project new "$P" --force --scheme sample_volumes/scheme.toml \
  --scans sample_volumes --voxel-size 36um,36um,50um

python3 - "$PLAN" <<'PY'
import datetime, hashlib, json, math, sys

VOXEL = 0.036  # in-plane voxel side, mm
IDS = [f"HDC-{n:03}" for n in range(1, 6)] + [f"TF-{n:03}" for n in range(1, 6)]
SECOND = {"HDC-002", "HDC-004", "TF-001", "TF-003"}
OPERATORS = {1: ("M. Ferreira", "2025-02-03T09:00:00Z"), 2: ("J. Lindqvist", "2025-02-17T13:30:00Z")}
# outward approach axis in the specimen frame (x forward, y the animal's left, z up)
AXIS = {
    "snout_tip": (1, 0, 0), "crest_top": (0, 0, 1), "occipital_condyle": (-1, 0, 0),
    "symphysis_ventral": (0, 0, -1), "jaw_joint_L": (0, 1, 0), "jaw_joint_R": (0, -1, 0),
    # from inside the naris opening towards its anterior wall
    "naris_anterior_L": (-1, 0, 0.5), "naris_anterior_R": (-1, 0, 0.5),
}
ON_SLICES = {"endocranium_centre", "orbit_centre_L", "orbit_centre_R",
             "orbit_posterior_L", "orbit_posterior_R"}

def unit(v):
    n = math.sqrt(sum(c * c for c in v))
    return [c / n for c in v]

def cross(a, b):
    return [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]]

def rand(*key):
    """Deterministic numbers in [0, 1) from a key."""
    h = hashlib.sha256("/".join(map(str, key)).encode()).digest()
    return [int.from_bytes(h[i:i + 4], "little") / 2**32 for i in range(0, 32, 4)]

def offset(normal, size, key):
    """A vector across `normal` of length size·(0.3…1)."""
    r = rand(*key)
    t1 = unit(cross(normal, [0, 0, 1] if abs(normal[2]) < 0.9 else [1, 0, 0]))
    t2 = cross(normal, t1)
    ang = 2 * math.pi * r[0]
    mag = size * (0.3 + 0.7 * r[1])
    return [mag * (math.cos(ang) * a + math.sin(ang) * b) for a, b in zip(t1, t2)]

def tilt(v, deg, key):
    """`v` tilted by `deg` degrees towards a direction across it."""
    d = unit(offset(v, 1.0, key))
    a = math.radians(deg)
    return unit([math.cos(a) * x + math.sin(a) * y for x, y in zip(v, d)])

def fmt(p):
    return ",".join(repr(float(c)) for c in p)

def clock(start, seconds):
    t = datetime.datetime.fromisoformat(start.replace("Z", "+00:00"))
    return (t + datetime.timedelta(seconds=seconds)).strftime("%Y-%m-%dT%H:%M:%SZ")

plan = []
for sid in IDS:
    truth = json.load(open(f"sample_volumes/{sid}.landmarks.json"))
    rot = [row[:3] for row in truth["world_from_specimen"][:3]]
    world = lambda v: [sum(rot[i][j] * v[j] for j in range(3)) for i in range(3)]
    pos = {l["id"]: [l["x"], l["y"], l["z"]] for l in truth["landmarks"]}
    plan.append(["group", sid, f"formation={truth['group']}"])
    plan.append(["group", sid, f"locality={truth['labels']['locality']}"])
    for trial in (1, 2) if sid in SECOND else (1,):
        op, start = OPERATORS[trial]
        plan.append(["trial", sid, str(trial), op, start])
        t = str(trial)
        for n, (lid, p) in enumerate(pos.items()):
            key = (sid, trial, lid)
            at = clock(start, 40 * (n + 1))  # one landmark every 40 s
            if sid == "TF-005" and lid == "crest_top":
                plan.append(["missing", sid, t, lid, at, "crest broken off during preparation"])
                continue
            if lid in ON_SLICES:
                off = offset([0, 0, 1], 1.0 * VOXEL, key)
                plan.append(["slice", sid, t, lid, at, fmt([a + b for a, b in zip(p, off)])])
                continue
            # walls seen from inside a space: from the centre of the orbit or of the braincase
            inner = {"orbit_anterior_L": "orbit_centre_L", "orbit_anterior_R": "orbit_centre_R",
                     "braincase_lateral_L": "endocranium_centre",
                     "braincase_lateral_R": "endocranium_centre"}
            if lid in inner:
                centre = pos[inner[lid]]
                out = unit([c - q for c, q in zip(centre, p)])
                reach = math.dist(centre, p)
            else:
                out = unit(world(AXIS[lid]))
                reach = 0.1 if lid.startswith("naris") else 0.25
            if trial == 2:
                out = tilt(out, 12.0, key + ("tilt",))
            aim = [a + b for a, b in zip(p, offset(out, 0.8 * VOXEL, key))]
            origin = [a + reach * b for a, b in zip(aim, out)]
            plan.append(["pick", sid, t, lid, at, fmt(origin), fmt(aim), f"{reach + 0.15:.3f}mm"])
        pts = truth["curves"][0]["points"]
        if trial == 2:
            pts = pts[1::2]
        traced = [[a + b for a, b in zip(q, offset([0, 0, 1], 0.5 * VOXEL, (sid, trial, "curve", i)))]
                  for i, q in enumerate(pts)]
        at = clock(start, 40 * len(pos) + 120)
        plan.append(["curve", sid, t, "dorsal_midline", at, ";".join(fmt(q) for q in traced)])
with open(sys.argv[1], "w") as f:
    for row in plan:
        f.write("\t".join(row) + "\n")
PY

# Replay the plan: one command-line call per label, trial, landmark and curve. Fields after
# the kind and specimen: group KEY=VALUE | trial ID OPERATOR TIME | pick TRIAL LANDMARK TIME
# FROM TOWARD MAX | slice TRIAL LANDMARK TIME POINT | missing TRIAL LANDMARK TIME NOTE |
# curve TRIAL CURVE TIME POINTS.
while IFS=$'\t' read -r kind sid f1 f2 f3 f4 f5 f6; do
  case "$kind" in
    group) $S project group "$P" "$sid" --set "$f1" ;;
    trial) $S trial new "$P" "$sid" --id "$f1" --operator "$f2" --time "$f3" ;;
    pick)
      $S landmark pick "$P" "$sid" "$f2" --trial "$f1" --time "$f3" \
        --from "$f4" --toward "$f5" --max-distance "$f6" 2>/dev/null ;;
    slice)
      $S landmark set "$P" "$sid" "$f2" --trial "$f1" --time "$f3" \
        --world-mm "$f4" --method slice 2>/dev/null ;;
    missing) $S landmark missing "$P" "$sid" "$f2" --trial "$f1" --time "$f3" --note "$f4" ;;
    curve) $S curve trace "$P" "$sid" "$f2" --trial "$f1" --time "$f3" --segment "$f4" ;;
  esac
done < "$PLAN"

$S project status "$P"
$S measure "$P" -o sample_volumes/sample_project_measurements.csv
rm -f "$P.bak" "sample_volumes/.$(basename "$P").lock"
echo "wrote $P and sample_volumes/sample_project_measurements.csv"
