namespace Bitbudget.Search.Planning;

/// <summary>One candidate for a layer: its bit width, the bytes it costs and the additive error it adds.</summary>
/// <param name="Bits">2..8, 16 (FP16) or 32 (FP32).</param>
/// <param name="Bytes">Bytes of the layer at these bits (see <see cref="CostModel.LayerBytes"/>).</param>
/// <param name="Error">Additive error contribution (>= 0) in the units of <see cref="AdditiveError"/>.</param>
/// <param name="Rounding">The rounding whose trial gave <paramref name="Error"/> (the better of those measured at this width).</param>
public sealed record PlanningChoice(int Bits, long Bytes, double Error, Quantization.RoundingMethod Rounding = Quantization.RoundingMethod.Nearest);
