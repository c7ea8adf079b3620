namespace Bitbudget.Search.Evaluation;

/// <summary>
/// One model output over the whole calibration set: the samples' outputs concatenated on axis 0, in
/// C order.
/// </summary>
public sealed record OutputTensor(string Name, float[] Data, IReadOnlyList<long> Shape);
