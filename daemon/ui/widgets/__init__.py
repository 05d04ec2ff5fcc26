"""One widget per piece of the dashboard; each redraws itself from the status it is bound to."""
