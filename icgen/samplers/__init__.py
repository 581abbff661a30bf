"""Per-kind particle samplers: positions by inverse CDFs, velocities from distribution
functions or Jeans moments, and the deterministic uniform deviates they consume. The
registry of kinds (icgen.kinds) picks them; icgen.sampling streams them."""
