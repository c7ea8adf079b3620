namespace Bitbudget.Service.Api;

/// <summary>A layer's sensitivity trial at one candidate width on both sides.</summary>
/// <param name="SqnrDb">Output SQNR with only this layer at <paramref name="Bits"/> (dB; null where infinite or not measured on that side).</param>
/// <param name="AdditiveError">What this choice adds to the search's additive error model on each side.</param>
internal sealed record ComparedWidth(int Bits, ComparedValue SqnrDb, ComparedValue AdditiveError);
