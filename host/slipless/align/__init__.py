"""Board clocks fitted to the laptop's: the clock model, aligned tables and the common grid."""
