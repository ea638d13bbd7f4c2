"""Planning a solve: window → slices with exact eigenvalue counts from inertia."""
