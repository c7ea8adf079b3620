namespace Bitbudget.Search.Evaluation;

/// <summary>
/// One model output over the whole calibration set, in C order: the runs' outputs joined along the
/// output's sample axis (<see cref="SampleAxis"/>). An output with no sample axis (null) holds one value
/// per run, stacked on a new leading axis.
/// </summary>
public sealed record OutputTensor(string Name, float[] Data, IReadOnlyList<long> Shape, int? SampleAxis = 0)
{
    /// <summary>Number of samples along <see cref="SampleAxis"/>; null when the output has none.</summary>
    public long? SampleCount => SampleAxis is int axis && axis < Shape.Count ? Shape[axis] : null;
}
