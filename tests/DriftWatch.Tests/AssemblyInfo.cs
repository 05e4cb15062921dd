// TorchSharp keeps native state per process (thread pools, the default dtype, random seeds); tests that train
// or attribute run one at a time so their numbers do not depend on scheduling.
[assembly: Xunit.CollectionBehavior(DisableTestParallelization = true)]
