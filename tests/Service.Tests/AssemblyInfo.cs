// Hangfire keeps its storage and activator in static configuration; hosts must not overlap.
[assembly: CollectionBehavior(DisableTestParallelization = true)]
