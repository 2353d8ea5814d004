"""The caution printed beside every quality number (a module of its own so that showing it, e.g. in
a command's help text, loads none of the numerics)."""

CAUTION = ("Quality numbers are estimates built on assumptions (Gaussian clusters in feature space, "
           "a refractory period, a stationary recording); calling a unit a \"single unit\" is a "
           "claim, not a fact.")
