# Helpers shared by submit.sh and status.sh (sourced, not run).

# Megabytes of a SLURM memory figure such as 4000M, 20G or 1T (plain numbers are MB).
to_mb() {
  local value=${1%[KMGTP]} unit=${1: -1}
  case $unit in
    K) echo $(( value / 1024 )) ;;
    G) echo $(( value * 1024 )) ;;
    T) echo $(( value * 1024 * 1024 )) ;;
    *) echo "$value" ;;
  esac
}

# "CPUS MEM_MB" of the largest node SLURM knows (most CPUs, most RealMemory, taken apart).
largest_node() {
  scontrol show node -o | awk '
    { for (i = 1; i <= NF; i++) { split($i, kv, "=");
        if (kv[1] == "CPUTot" && kv[2] + 0 > cpus) cpus = kv[2] + 0;
        if (kv[1] == "RealMemory" && kv[2] + 0 > mem) mem = kv[2] + 0 } }
    END { if (cpus == "") exit 1; print cpus, mem }'
}

# Message for a request no node can hold, or nothing when some node can.
never_fits() {
  local what=$1 cpus=$2 mem_mb=$3 max_cpus max_mem
  read -r max_cpus max_mem < <(largest_node) || { echo "$what: no SLURM node found (scontrol show node)"; return; }
  if (( cpus > max_cpus || mem_mb > max_mem )); then
    echo "$what asks for $cpus CPUs and $mem_mb MB, but the largest node offers $max_cpus CPUs" \
      "(CPUTot) and $max_mem MB (RealMemory), so SLURM would keep it pending forever." \
      "Lower the rule's threads/mem_mb (config 'resources', or --set-threads/--set-resources)" \
      "or run on a larger node."
  fi
}
