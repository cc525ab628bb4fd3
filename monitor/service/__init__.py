"""The always-on service (``gapwatch run``): scheduler, claims of comparisons, alert delivery."""
