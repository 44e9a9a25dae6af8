"""HTTP routes: one router per module, each a thin wrapper over ``analysis``."""
