"""Customer value: expected remaining lifetime, discounted value per cohort and per active
customer, the forecast of the current base, revenue retention and price-change scenarios."""
