namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Caps on what a dataset file may make the engine read, so an upload cannot exhaust memory.
/// Byte counts are of decoded array data (uncompressed), counted as it is read, not as headers claim.
/// </summary>
/// <param name="MaxTotalBytes">Most uncompressed bytes over all arrays of one file.</param>
/// <param name="MaxArrayBytes">Most uncompressed bytes of one array (one .npz member).</param>
/// <param name="MaxArrays">Most arrays (members) in one .npz.</param>
/// <param name="MaxCompressionRatio">
/// Most uncompressed bytes per compressed byte of one .npz member; checked once a member has inflated
/// past 1 MiB, because small members legitimately compress far beyond any sane ratio of large ones.
/// </param>
public sealed record DatasetLimits(
    long MaxTotalBytes = 1L << 30,
    long MaxArrayBytes = 1L << 30,
    int MaxArrays = 64,
    double MaxCompressionRatio = 200)
{
    /// <summary>The limits used when a caller passes none.</summary>
    public static DatasetLimits Default { get; } = new();
}
