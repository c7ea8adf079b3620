namespace Bitbudget.Search.Planning;

/// <summary>Size of a model under an assignment.</summary>
/// <param name="Bytes">Stored weight bytes: quantized layers plus unchanged tensors.</param>
/// <param name="Float32Bytes">The same tensors all kept in FP32.</param>
/// <param name="AverageBits">Stored bits per quantizable weight, scales and zero points included.</param>
/// <param name="Compression"><paramref name="Float32Bytes"/> over <paramref name="Bytes"/>.</param>
public sealed record SizeTotals(long Bytes, long Float32Bytes, double AverageBits, double Compression);
