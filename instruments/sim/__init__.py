"""The simulated bench: SCPI raw-socket servers (scope, supply, chamber) on 127.0.0.1 that speak the
generic profile, with a population of simulated parts behind them and fault injection per connection."""
