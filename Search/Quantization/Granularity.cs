namespace Bitbudget.Search.Quantization;

/// <summary>Whether one scale serves the whole weight or one scale per output channel.</summary>
public enum Granularity
{
    PerTensor,
    PerChannel,
}
