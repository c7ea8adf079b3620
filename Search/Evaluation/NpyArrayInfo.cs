namespace Bitbudget.Search.Evaluation;

/// <summary>What a .npy header says about one array, without its data.</summary>
/// <param name="ByteCount">Bytes the data takes once decoded: element count times element size.</param>
public sealed record NpyArrayInfo(string Name, ElementType ElementType, IReadOnlyList<long> Shape, long ByteCount)
{
    /// <summary>Length of the first (sample) axis; 1 for a 0-d array.</summary>
    public long SampleCount => Shape.Count == 0 ? 1 : Shape[0];
}
