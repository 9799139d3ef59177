"""kernels stage of retain."""
