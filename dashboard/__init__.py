"""cloakrcs dashboard (Dash): reads stored results, never redoes physics."""
