namespace Bitbudget.Search.Quantization;

/// <summary>The real interval a channel is clipped to before quantization; symmetric ranges have Low = -High.</summary>
public readonly record struct ClipRange(float Low, float High);
