"""The caution printed with every result and written into every run folder."""

CAUTION = (
    "CAUTION: closure-nn results are engineering estimates from simplified steady-state models "
    "and fitted closures. They are not a design basis: any pipeline design or operating decision "
    "must be checked by qualified engineers against local codes and licensed practice."
)
