# Shared by `start` and `stop`: where an instance lives and whether its process is ours.
# An instance is one broker: mode (plain|sasl) and client port name its directory, so a plain
# broker, a SASL broker and a test's private broker can run side by side.

KAFKA_VERSION=3.9.1
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
run_root="$here/.run"

die() { echo "local-kafka: $*" >&2; exit 1; }

usage() {
  cat <<USAGE
usage: deploy/local-kafka/$1 [--sasl] [--port N]${2:-}

  (default)   plain broker on 127.0.0.1:\${KAFKA_PORT:-9092}
  --sasl      broker requiring SASL (SCRAM-SHA-256/512, PLAIN) on 127.0.0.1:\${KAFKA_SASL_PORT:-9094}
              (also KAFKA_SASL=1); client credentials are written to .run/sasl-PORT/client.env
  --port N    client port (overrides the environment)
USAGE
}

# Sets mode, port, dir from the arguments already parsed into sasl/port_arg.
resolve_instance() {
  if [ "${sasl:-0}" = 1 ]; then
    mode=sasl
    port="${port_arg:-${KAFKA_SASL_PORT:-9094}}"
  else
    mode=plain
    port="${port_arg:-${KAFKA_PORT:-9092}}"
  fi
  [[ "$port" =~ ^[0-9]+$ ]] && [ "$port" -ge 1 ] && [ "$port" -le 65535 ] || die "port must be 1..65535, got '$port'"
  dir="$run_root/$mode-$port"
}

# The pid in the instance's pid file, if that process is alive and is this instance's broker.
instance_pid() {
  local pid
  [ -f "$dir/pid" ] || return 1
  pid="$(cat "$dir/pid" 2>/dev/null)"
  [[ "$pid" =~ ^[0-9]+$ ]] || return 1
  kill -0 "$pid" 2>/dev/null || return 1
  # A recycled pid belongs to some other program: the command line must name our config file.
  tr '\0' ' ' <"/proc/$pid/cmdline" 2>/dev/null | grep -qF "$dir/server.properties" || return 1
  echo "$pid"
}

# A broker of this instance whose pid file was lost (a concurrent stop, a wiped .run): found by its
# command line, which names this instance's config file.
find_orphan() {
  local f pid
  for f in /proc/[0-9]*/cmdline; do
    pid="${f#/proc/}"
    pid="${pid%/cmdline}"
    if { tr '\0' ' ' <"$f"; } 2>/dev/null | grep -q "kafka\.Kafka $dir/server\.properties"; then
      echo "$pid"
      return 0
    fi
  done
  return 1
}

# start and stop of one instance never overlap.
lock_instance() {
  mkdir -p "$run_root"
  exec 8>"$run_root/.lock-$mode-$port"
  flock -w 600 8 || die "timed out waiting for another start or stop of $mode-$port"
}

port_in_use() {
  (exec 3<>"/dev/tcp/127.0.0.1/$1") 2>/dev/null
}
