"""Built-in convert stage: signal to concentration (pathlength, extinction, standard curves)."""
