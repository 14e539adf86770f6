#!/usr/bin/env bash
# Rewrites the demo traces from their recipes (host-sim/src/demo_cmd.rs, SCENARIOS: glowsim synth
# options with fixed seeds). host-sim/tests/demo_regenerate.rs holds the result byte-identical to the
# committed files.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
cd "$here/../../.."
cargo run -q --release -p glowcheck-sim -- demo --regenerate "$here"
