namespace Bitbudget.Service.Demo;

/// <summary>What a demo generation produced: the files, the training history, the trained network and the sets it was written with.</summary>
internal sealed record DemoResult(
    IReadOnlyList<DemoFile> Files,
    IReadOnlyList<TrainingEpoch> Epochs,
    HiveNet Network,
    HiveSoundSet Calibration,
    HiveSoundSet Holdout,
    double HoldoutAccuracy,
    TimeSpan Elapsed,
    HiveStream Stream);
